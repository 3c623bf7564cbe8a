"""The one rule set that cuts a model's direct reply down to the answer its question asks for.

A model answering without a tool (the run loop's fallback, the eval's direct methods) writes sentences:
"Yes, the code passes.", "The boat on berth 1 is the Samphire." A program reading the answers file, and the
scoring, need "yes" and "Samphire". The rules, in order:

1. The answer part of the reply: the text after the last "Answer:" (or "answer is:"), else its last line.
2. The kind of answer the question asks for, from cues in the question (first match wins):
   - yes/no: it says "yes or no", or one of its sentences ending in "?" starts with a verb such as "is",
     "does" or "can" (a closed question, as English grammar has it);
   - number: "how many", "how much", "how long", "which/what/first/earliest minute", "digit", "what number";
   - time: the question states clock times (HH:MM);
   - date: the question states ISO dates (YYYY-MM-DD) and asks "which/what date" or "which/what day";
   - name: anything else; the answer is then a name or code the question itself uses.
3. The answer of that kind in the answer part:
   - yes/no: the first word that says yes ("yes", "true", "valid", "correct", "right", "passes") or no
     ("no", "not", "false", "invalid", "incorrect", "wrong", "fails", and n't-forms) decides;
   - number: the first number standing on its own (not part of a date, a clock time or a code such as
     NET-127), as an integer when it is whole;
   - time: the first clock time, as HH:MM, with the ISO date written just before it if there is one
     ("2026-09-02 19:55": a date given with the time is part of the answer);
   - date: the first ISO date;
   - name: the names the question uses (a word with a capital letter, or a code with digits, that the question
     has at least once away from the start of a sentence (after ".", "!", "?" or a line break), so "The" or
     "Berth" opening a sentence is not a name) found in the answer part: one distinct name gives it; several
     give the one the answer part starts with, if any, unless a list goes on from it ("Elowen/Loveday",
     "Elowen or Loveday", "Elowen, Loveday": a hedge or a list is not one answer).
4. When the rule for the kind finds nothing (or the answer part is "unknown"), the answer part stays as it is.

The model's full reply is always kept beside the answer (the answer record's `reply`), so nothing is lost.
All functions here are pure.
"""

from __future__ import annotations

import re
from typing import Any, Literal

Kind = Literal["yes/no", "number", "time", "date", "name"]
# Part of the eval's cache key for direct methods: change it when a rule changes, so cached answers are redone.
RULES_VERSION = "3"

_ANSWER_MARK = re.compile(r"answer\s*(?:is)?\s*[:=]\s*(.+)", re.IGNORECASE)
_TIME = re.compile(r"(?<![\d:])([01]?\d|2[0-3]):([0-5]\d)(?![\d:])")
_DATE = re.compile(r"(?<!\d)(\d{4})-(\d{2})-(\d{2})(?!\d)")
# A number on its own: not touching letters, digits, hyphens, colons (clock times) or other dots of a code.
_NUMBER = re.compile(r"(?<![\w\-:.])-?\d+(?:\.\d+)?(?![\w\-:]|\.\d)")
_CLOSED_START = re.compile(r"^(is|are|was|were|does|do|did|can|could|will|would|should|has|have|had|must|may)\b",
                           re.IGNORECASE)
_NUMBER_CUES = re.compile(r"\bhow (many|much|long)\b|\b(which|what|first|earliest|latest) minute\b|\bdigit\b"
                          r"|\bwhat number\b", re.IGNORECASE)
_DATE_CUES = re.compile(r"\b(which|what) (date|day)\b", re.IGNORECASE)
_YES = {"yes", "true", "valid", "correct", "right", "passes", "pass"}
_NO = {"no", "not", "false", "invalid", "incorrect", "wrong", "fails", "fail", "cannot"}
_WORD = re.compile(r"[A-Za-z][A-Za-z0-9'’\-]*")
# A name or code: a capitalised word (Samphire, Dunlin's → Dunlin) or a code with a digit (NET-127, QCFZ3074566).
_NAME = re.compile(r"\b(?:[A-Z]{2,}-?\d[\w\-]*|[A-Z][A-Za-z]*(?:-[A-Z]?[A-Za-z0-9]+)*)")
_SENTENCE_START = re.compile(r"(?:^|[.!?]\s+|\n\s*)$")


def answer_part(reply: str) -> str:
    """The answer part of a free-text reply: after the last 'Answer:' if present, else the last line."""
    m = list(_ANSWER_MARK.finditer(reply))
    if m:
        return m[-1].group(1).strip().strip("*").strip()
    lines = [ln.strip() for ln in reply.strip().splitlines() if ln.strip()]
    return lines[-1] if lines else ""


def _sentences(text: str) -> list[str]:
    return [s.strip() for s in re.split(r"(?<=[.!?;:])\s+", text) if s.strip()]


def question_kind(question: str) -> Kind:
    """What kind of answer `question` asks for (rule 2 of the module's rules)."""
    low = question.casefold()
    if "yes or no" in low or any(s.endswith("?") and _CLOSED_START.match(s) for s in _sentences(question)):
        return "yes/no"
    if _NUMBER_CUES.search(question):
        return "number"
    if _TIME.search(question):
        return "time"
    if _DATE.search(question) and _DATE_CUES.search(question):
        return "date"
    return "name"


def question_names(question: str) -> list[str]:
    """Names and codes the question uses, each at least once away from the start of a sentence, in order."""
    names: list[str] = []
    for m in _NAME.finditer(question):
        word = m.group(0).rstrip("-")
        if _SENTENCE_START.search(question[:m.start()]):
            continue
        if word not in names:
            names.append(word)
    return names


def _yes_no(text: str) -> str | None:
    for w in _WORD.findall(text):
        w = w.casefold().replace("’", "'")
        if w in _YES:
            return "yes"
        if w in _NO or w.endswith("n't"):
            return "no"
    return None


def _number(text: str) -> int | float | None:
    text = _DATE.sub(" ", text)
    text = _TIME.sub(" ", text)
    m = _NUMBER.search(text)
    if not m:
        return None
    value = float(m.group(0))
    return int(value) if value == int(value) else value


def _time(text: str) -> str | None:
    m = _TIME.search(text)
    if not m:
        return None
    hhmm = f"{int(m.group(1)):02d}:{m.group(2)}"
    day = re.search(r"(\d{4}-\d{2}-\d{2})[T ]$", text[:m.start()])
    return f"{day.group(1)} {hhmm}" if day else hhmm


def _date(text: str) -> str | None:
    m = _DATE.search(text)
    return m.group(0) if m else None


def _name(question: str, text: str) -> str | None:
    found = [n for n in question_names(question)
             if re.search(rf"(?<![\w\-]){re.escape(n)}(?![\w\-])", text, re.IGNORECASE)]
    if len(found) == 1:
        return found[0]
    lead = re.sub(r"^(the|a|an)\s+", "", text.strip(), flags=re.IGNORECASE)
    for n in found:
        m = re.match(rf"{re.escape(n)}(?![\w\-])", lead, re.IGNORECASE)
        if m:
            listed = re.match(r"\s*(/|,\s*[A-Z]|;|&|\+|(?i:or|and)\b)", lead[m.end():])
            return None if listed else n
    return None


def reduce_answer(question: str, answer: str) -> Any:
    """The answer of the kind `question` asks for within `answer` (rules 2-4), else `answer` unchanged."""
    text = answer.strip()
    if not text or text.strip(".").casefold() == "unknown":
        return text
    kind = question_kind(question)
    if kind == "yes/no":
        found: Any = _yes_no(text)
    elif kind == "number":
        found = _number(text)
    elif kind == "time":
        found = _time(text)
    elif kind == "date":
        found = _date(text)
    else:
        found = _name(question, text)
    return text if found is None else found


def direct_answer(question: str, reply: str) -> Any:
    """The whole rule set: a model's direct reply to `question` cut down to the answer it asks for."""
    return reduce_answer(question, answer_part(reply))


__all__ = ["Kind", "RULES_VERSION", "answer_part", "question_kind", "question_names", "reduce_answer", "direct_answer"]
