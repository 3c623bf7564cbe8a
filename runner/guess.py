"""Guesses of an executor reply read from the question, for `guided.decode` to check in one batch.

Arguments copy the question's values, mostly in the order the question gives them. After the values a reply
already holds, the next value of the right kind is most often the next one in the question: the next number for
an integer, the next date for a date, the rest of the word the model has started for a string, a word shaped
like the last string written for a string not started yet. Between values the schema forces the text (keys,
quotes, separators), and whether a list goes on is guessed from whether the question holds another value of
its items' kind. A draft is only a guess: every drafted token is checked against the model's own choice, and
the first that differs is replaced by the model's token."""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Callable

from .forced import Cursor

ATOM = re.compile(r"\d{4}-\d{2}-\d{2}|\d{1,2}:\d{2}|[^\W\d_]\w*(?:[-'][^\W_]+)*|-?\d+(?:\.\d+)?")


@dataclass(frozen=True)
class Atom:
    text: str
    number: float | None
    stop: bool  # a word the demos' questions use but their arguments never copy ("The", "minute")


def _number(text: str) -> float | None:
    try:
        return float(text)
    except ValueError:
        return None


def scan_values(text: str) -> tuple[list[str], str | None]:
    """The complete scalar values (strings not used as keys, numbers) of a partial JSON reply, in order, and
    the partial value at its end (the characters of an open string, or the digits of a number), if any."""
    values: list[str] = []
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if ch == '"':
            j, chars = i + 1, []
            while j < n and text[j] != '"':
                if text[j] == "\\" and j + 1 < n:
                    j += 1
                chars.append(text[j])
                j += 1
            if j >= n:
                return values, "".join(chars)
            k = j + 1
            while k < n and text[k] == " ":
                k += 1
            if k >= n or text[k] != ":":
                values.append("".join(chars))
            i = j + 1
        elif ch == "-" or ch.isdigit():
            j = i + 1
            while j < n and (text[j].isdigit() or text[j] in ".eE+-"):
                j += 1
            if j >= n:
                return values, text[i:j]
            values.append(text[i:j])
            i = j
        else:
            i += 1
    return values, None


def shape(text: str) -> re.Pattern[str]:
    """The character-class shape of a value: "CHAIN-23" gives [A-Z]+-[0-9]+, "Curlew" [A-Z]+[a-z]+."""
    parts = []
    for m in re.finditer(r"[A-Z]+|[a-z]+|[0-9]+|.", text):
        g = m.group()
        parts.append("[A-Z]+" if g.isascii() and g.isalpha() and g.isupper()
                     else "[a-z]+" if g.isascii() and g.isalpha() and g.islower()
                     else "[0-9]+" if g.isdigit() else re.escape(g))
    return re.compile("".join(parts))


def _leaves(schema: dict[str, Any]) -> list[tuple[str, str | None]]:
    t = schema.get("type")
    if t == "object":
        return [leaf for v in schema.get("properties", {}).values() for leaf in _leaves(v)]
    if t == "array":
        return _leaves(schema.get("items", {}))
    return [(str(t), schema.get("pattern"))]


def demos_of(messages: list[dict[str, str]]) -> tuple[str, list[tuple[str, str]]]:
    """The question (the last user turn) and the (question, reply) pairs of the few-shot turns before it."""
    turns = [m for m in messages if m["role"] in ("user", "assistant")]
    pairs = [(a["content"], b["content"]) for a, b in zip(turns, turns[1:])
             if a["role"] == "user" and b["role"] == "assistant"]
    return (turns[-1]["content"] if turns and turns[-1]["role"] == "user" else ""), pairs


class Drafter:
    """Guesses the rest of a reply from the question and the few-shot demos (see the module's docstring)."""

    def __init__(self, question: str, demos: list[tuple[str, str]]):
        copied = {m.group() for _, reply in demos for m in ATOM.finditer(reply)}
        asked = {m.group() for q, _ in demos for m in ATOM.finditer(q)}
        stop = asked - copied
        self.atoms = [Atom(m.group(), _number(m.group()), m.group() in stop) for m in ATOM.finditer(question)]

    @classmethod
    def for_chat(cls, messages: list[dict[str, str]]) -> "Drafter":
        question, demos = demos_of(messages)
        return cls(question, demos)

    def _align(self, values: list[str]) -> int:
        """The index after the question atom of the last value written (values matched to atoms in order)."""
        p = 0
        for v in values:
            num = _number(v)
            for i in list(range(p, len(self.atoms))) + list(range(p)):
                a = self.atoms[i]
                if a.text == v or (num is not None and a.number == num):
                    p = i + 1
                    break
        return p

    def _next(self, p: int, fits: Callable[[Atom], bool], wrap: bool = True) -> Atom | None:
        for i in list(range(p, len(self.atoms))) + (list(range(p)) if wrap else []):
            if fits(self.atoms[i]):
                return self.atoms[i]
        return None

    def draft(self, cursor: Cursor, reply: str, limit: int = 240) -> str:
        """Text to append after `reply`: forced spans, and guessed values and list choices between them; it
        stops where it has no guess."""
        out = ""
        c = cursor
        while not c.done and len(out) < limit:
            f = c.forced()
            if f:
                out += f
                c = c.feed(f) or c
                continue
            add = self._guess(c, reply + out)
            nxt = c.feed(add) if add else None
            if nxt is None:
                break
            out += add
            c = nxt
        return out

    def _guess(self, c: Cursor, text: str) -> str | None:
        values, partial = scan_values(text)
        p = self._align(values)
        last_string = next((v for v in reversed(values) if _number(v) is None), None)
        kind, info = c.choice()
        if kind == "string":
            part = partial or ""
            if info is not None:  # a pattern: the next atom that matches it whole
                pat = "".join(f"[{re.escape(''.join(sorted(chars)))}]{{{lo},{hi}}}" for chars, lo, hi in info)
                atom = self._next(p, lambda a: a.text.startswith(part) and re.fullmatch(pat, a.text) is not None)
            elif part:
                atom = self._next(p, lambda a: not a.stop and a.text.startswith(part) and len(a.text) > len(part))
            elif last_string is not None:
                sh = shape(last_string)
                atom = self._next(p, lambda a: not a.stop and a.number is None and sh.fullmatch(a.text) is not None)
            else:
                atom = None
            return atom.text[len(part):] + '"' if atom is not None else None
        if kind == "number":
            in_number = c.stack[-1][0] == "num"
            part = (partial or "") if in_number else ""
            if in_number and any(a.text == part for a in self.atoms):
                return self._after_value(Cursor(c.stack[:-1]), p)  # the number is written: what follows it
            integer = bool(info)
            atom = self._next(p, lambda a: a.number is not None and a.text.startswith(part) and len(a.text) > len(part)
                              and (not integer or re.fullmatch(r"-?\d+", a.text) is not None), wrap=False)
            return atom.text[len(part):] if atom is not None else None
        if kind == "array":
            return self._list_choice(c, info, p, last_string)
        return None

    def _after_value(self, closed: Cursor, p: int) -> str | None:
        """What follows a complete number: the first forced character, or a list's choice."""
        f = closed.forced()
        if f:
            return f[0]
        kind, info = closed.choice()
        if kind == "array":
            return "," if self._more(info, p, None) else "]"
        return None

    def _list_choice(self, c: Cursor, item: dict[str, Any], p: int, last_string: str | None) -> str | None:
        if not self._more(item, p, last_string):
            return "]"
        if c.stack[-1][2] == "after":
            return ","
        first = {"object": "{", "string": '"', "array": "["}.get(str(item.get("type")))
        if first:
            return first
        atom = self._next(p, lambda a: a.number is not None, wrap=False)
        return atom.text if atom is not None else None

    def _more(self, item: dict[str, Any], p: int, last_string: str | None) -> bool:
        """Whether the question holds another list item after the values written: a number left for items with
        numbers, a match for a pattern, else a word shaped like the last string written."""
        leaves = _leaves(item)
        if any(t in ("integer", "number") for t, _ in leaves):
            return self._next(p, lambda a: a.number is not None, wrap=False) is not None
        pats = [pat for t, pat in leaves if t == "string" and pat]
        if pats:
            rx = pats[0].strip("^$")
            return self._next(p, lambda a: re.fullmatch(rx, a.text) is not None, wrap=False) is not None
        if last_string is not None:
            sh = shape(last_string)
            return self._next(p, lambda a: not a.stop and sh.fullmatch(a.text) is not None, wrap=False) is not None
        return False


__all__ = ["Drafter", "scan_values", "shape", "demos_of", "ATOM"]
