"""The executor's step: fill a tool's arguments from a question under its JSON Schema, call the tool in the
sandbox, and normalise the value into an answer. Also the pure answer-comparison rules used everywhere."""

from __future__ import annotations

import json
import math
import re
from typing import Any

import jsonschema
from pydantic import BaseModel

from . import answerform, prompts
from . import forced as forced_spans
from .llm import ChatModel, Message
from .meter import Usage
from .tools import Card, Tool
from .warmstate import PromptPrefix

EXECUTOR_TEMPLATE = "executor_fill.j2"


class Filled(BaseModel):
    """The executor's argument object for one question (or why there is none), what it cost, and how it was
    asked: "free" (no grammar), "free, then schema" (the free reply missed) or "schema" (straight away)."""

    arguments: dict[str, Any] | None
    error: str | None = None
    usage: Usage = Usage()
    raw: str = ""
    mode: str = "free"


def fill_messages(card: Card, question: str) -> list[Message]:
    """Few-shot chat: the card's demos as earlier turns, so every question of one tool shares the prefix."""
    msgs: list[Message] = [{"role": "system", "content": prompts.render(EXECUTOR_TEMPLATE, card=card)}]
    for demo in card.demos:
        msgs.append({"role": "user", "content": demo.question})
        msgs.append({"role": "assistant", "content": json.dumps(demo.arguments, ensure_ascii=False)})
    msgs.append({"role": "user", "content": question})
    return msgs


def fill_prefix(card: Card) -> PromptPrefix:
    """The fill prompt before the question is the same for every question of one tool: its state is kept."""
    return PromptPrefix(f"fill:{card.name}", (EXECUTOR_TEMPLATE,))


def token_budget(card: Card) -> int:
    """Enough tokens for an argument object a bit larger than the largest demo (JSON is ~1 token / 3 chars)."""
    longest = max((len(json.dumps(d.arguments, ensure_ascii=False)) for d in card.demos), default=200)
    return int(longest * 0.6) + 48


def schema_problem(schema: dict[str, Any], arguments: Any) -> str | None:
    """None when `arguments` satisfies `schema`, else the validator's first complaint (jsonschema)."""
    try:
        jsonschema.validate(arguments, schema)
    except jsonschema.ValidationError as exc:
        where = "/".join(str(p) for p in exc.absolute_path) or "(top)"
        return f"arguments do not fit the schema at {where}: {exc.message}"
    return None


# How the executor fills arguments (part of the eval's result key). A greedy fill (the first attempt) whose schema
# the forced path handles is one pass of `LocalModel.chat_forced`: the spans the schema forces (keys, quotes,
# separators, closing brackets) and a draft of the values guessed from the question are evaluated in batches,
# and at every guessed place the model's own best fitting token is kept; plain strings that every demo copies
# whole from its question are held to whole-word pieces of the question (`fill_schema`). Its reply is the free
# greedy reply when that fits the schema and the grammar's reply otherwise (bench/forced_fill_bench.py compares them on the
# families' test tasks; bench/split_cost.py measures the CPU per task against builder-direct).
# Otherwise (a retry at a temperature, a model or schema the forced path does not handle) the fill is asked
# free, checked with jsonschema, and asked again under the schema's grammar only when it does not fit; a tool
# whose free fill has missed once goes straight to the grammar for the rest of the process. Measured with
# bench/fill_bench.py (one thread, 8 fills each): departures gave the same replies free, 3.5 CPU s per fill
# against 4.8 s under the grammar (grammar-constrained sampling over the 151k-token vocabulary is the
# difference); manifest_order's free replies fit the schema in 4 of 8 (labels left unquoted).
FILL_METHOD = "forced spans and copied strings when greedy; else free-then-schema, schema after a miss"
_FREE_MISSED: set[str] = set()  # schemas whose free fill has missed once in this process
FREE_THEN_SCHEMA = "free, then schema"  # the mode of a fill whose free reply missed


def forget_fill_misses(card: Card | None = None) -> None:
    """Start again with free fills for every tool (tests; a long-lived process after tools change), or for
    the one card given (the eval, at the start of a family's split)."""
    if card is None:
        _FREE_MISSED.clear()
    else:
        _FREE_MISSED.discard(json.dumps(card.schema_, sort_keys=True))


def replay_fill_modes(card: Card, modes: list[str]) -> None:
    """Take in a miss that an earlier result records (a fill asked free, then under the schema) as if that
    fill had just run here: the eval reuses such results and the later fills must start as they did."""
    if FREE_THEN_SCHEMA in modes:
        _FREE_MISSED.add(json.dumps(card.schema_, sort_keys=True))


def fill_start(card: Card) -> str:
    """How this process will ask for the card's next fill: "free" first, or "schema" after an earlier miss.
    It changes results, so eval keys hold it."""
    return "schema" if json.dumps(card.schema_, sort_keys=True) in _FREE_MISSED else "free"


def _parse_fill(card: Card, text: str, finish_reason: str) -> tuple[dict[str, Any] | None, str | None]:
    try:
        args = json.loads(text)
    except ValueError:
        return None, f"executor reply is not JSON ({finish_reason}): {text[:80]!r}"
    problem = schema_problem(card.schema_, args)
    return (None, problem) if problem else (args, None)


def fill_schema(card: Card, question: str, copy: bool = True) -> dict[str, Any]:
    """The schema a forced fill of `question` follows: the card's, with every plain string that the card's
    demos all copy whole from their questions (a code, a name) held to a whole-word piece of this question
    (`copy` off: the card's schema as it is, for measuring)."""
    if not copy:
        return card.schema_
    paths = forced_spans.copied_paths(card.schema_, [(d.question, d.arguments) for d in card.demos])
    return forced_spans.copy_schema(card.schema_, paths, question)


def fill_arguments(model: ChatModel, card: Card, question: str, *, seed: int, temperature: float = 0.0,
                   forced: bool = True, keep_state: bool = True, copy: bool = True) -> Filled:
    """Ask the executor for the argument object of `question`. Greedy fills go through the model's forced path
    when it has one (`chat_forced`) and `forced` is on; otherwise, if the free reply does not fit the card's
    schema, ask again constrained by the schema (the cost of both calls is counted), and from then on ask this
    tool's fills under the schema straight away. `keep_state`: load or save the state of the prompt before
    the question (off while building, where cards are candidates that may never be kept). `copy`: hold copied
    strings to pieces of the question on the forced path (`fill_schema`)."""
    messages = fill_messages(card, question)
    prefix = fill_prefix(card) if keep_state else None
    chat_forced = getattr(model, "chat_forced", None)
    if forced and temperature == 0.0 and chat_forced is not None:
        reply = chat_forced(messages, schema=fill_schema(card, question, copy), max_tokens=token_budget(card),
                            prefix=prefix)
        if reply is not None:
            args, error = _parse_fill(card, reply.text, reply.finish_reason)
            return Filled(arguments=args, error=error, usage=reply.usage, raw=reply.text)
    usage = Usage()
    schema_key = json.dumps(card.schema_, sort_keys=True)
    if schema_key not in _FREE_MISSED:
        reply = model.chat(messages, seed=seed, temperature=temperature, max_tokens=token_budget(card),
                           prefix=prefix)
        args, error = _parse_fill(card, reply.text, reply.finish_reason)
        if args is not None:
            return Filled(arguments=args, usage=reply.usage, raw=reply.text, mode="free")
        _FREE_MISSED.add(schema_key)
        usage = reply.usage
        mode = FREE_THEN_SCHEMA
    else:
        mode = "schema"
    reply = model.chat(messages, seed=seed, temperature=temperature, max_tokens=token_budget(card),
                       schema=card.schema_, prefix=prefix)
    args, error = _parse_fill(card, reply.text, reply.finish_reason)
    return Filled(arguments=args, error=error, usage=usage + reply.usage, raw=reply.text, mode=mode)


# ---- answers ----------------------------------------------------------------------------------------------

_WORDS = {"yes": "yes", "true": "yes", "valid": "yes", "no": "no", "false": "no", "invalid": "no"}
# Floats compare within this relative tolerance unless the family's family.toml sets `tolerance`; integers and
# text compare exactly after normalisation.
REL_TOL = 1e-9
_INT = re.compile(r"-?\d+")
_FLOAT = re.compile(r"-?(\d+\.\d*|\.\d+|\d+(\.\d*)?[eE][-+]?\d+)")


def _text(value: Any) -> str:
    text = re.sub(r"\s+", " ", str(value)).strip().strip(".").strip().casefold()
    return re.sub(r"^(the|a|an) ", "", text)


def normalise(value: Any) -> str:
    """A canonical text form of an answer: case, spacing, leading articles, trailing dots and number forms
    ("158.", "158.0", 158) do not matter; yes/true/valid are one word, as are no/false/invalid; lists join
    element-wise in order. Floats keep every digit (repr), so text equality is exact."""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        if isinstance(value, float) and math.isfinite(value) and value == int(value) and abs(value) < 2 ** 53:
            value = int(value)
        return str(value) if isinstance(value, int) else repr(value)
    if isinstance(value, (list, tuple)):
        return ", ".join(normalise(v) for v in value)
    if value is None:
        return ""
    number = as_number(value)
    if number is not None:
        return normalise(number)
    text = _text(value)
    return _WORDS.get(text, text)


def as_number(value: Any) -> int | float | None:
    """The number an answer states (an int or float, or text that is only a number), else None."""
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        return value
    if isinstance(value, str):
        text = _text(value)
        if _INT.fullmatch(text):
            return int(text)
        if _FLOAT.fullmatch(text):
            return float(text)
    return None


def answers_match(expected: Any, got: Any, rel_tol: float = REL_TOL) -> bool:
    """Whether `got` is the `expected` answer: integers exactly, floats within `rel_tol` (relative), text and
    yes/no words exactly after `normalise`, lists element by element in order. A missing answer (None)
    never matches: not even an expected empty text."""
    if expected is None or got is None:
        return False
    if isinstance(expected, (list, tuple)) and isinstance(got, (list, tuple)):
        return len(expected) == len(got) and all(answers_match(e, g, rel_tol) for e, g in zip(expected, got))
    if isinstance(expected, (list, tuple)) or isinstance(got, (list, tuple)):
        return normalise(expected) == normalise(got)  # a list written out as text ("Ana, Bo")
    a, b = as_number(expected), as_number(got)
    if a is not None and b is not None:
        if isinstance(a, int) and isinstance(b, int):
            return a == b
        if not (math.isfinite(a) and math.isfinite(b)):
            return a == b
        return a == b or math.isclose(a, b, rel_tol=rel_tol, abs_tol=0.0)
    return normalise(expected) == normalise(got)


def extract_answer(text: str) -> str:
    """The answer part of a free-text model reply (the rule lives in answerform)."""
    return answerform.answer_part(text)


# ---- calling the tool, with one retry; and the direct answer (the fallback) ------------------------------

DIRECT_TEMPLATE = "direct_answer.j2"
DIRECT_MAX_TOKENS = 192  # the fallback's reply budget: short working, then 'Answer: ...'


class ToolAnswer(BaseModel):
    """The outcome of answering one question with one tool: the value (JSON as the tool returned it) or why
    not, the arguments used, how many fill attempts it took, and the cost split into model and tool."""

    ok: bool
    value: Any = None
    arguments: dict[str, Any] | None = None
    error: str | None = None
    attempts: int = 0
    usage: Usage = Usage()
    tool_cpu_seconds: float = 0.0
    tool_wall_seconds: float = 0.0
    fill_modes: list[str] = []


def answer_with_tool(model: ChatModel, tool: Tool, question: str, sandbox: Any, *, seed: int,
                     retries: int = 1, retry_temperature: float = 0.3) -> ToolAnswer:
    """Fill the arguments (greedy), run the tool in the sandbox; on a schema failure or a tool error, try
    again with the next seed at `retry_temperature`, up to `retries` more times."""
    usage, tool_cpu, tool_wall, error = Usage(), 0.0, 0.0, None
    arguments: dict[str, Any] | None = None
    modes: list[str] = []
    for attempt in range(retries + 1):
        filled = fill_arguments(model, tool.card, question, seed=seed + attempt,
                                temperature=0.0 if attempt == 0 else retry_temperature)
        usage = usage + filled.usage
        modes.append(filled.mode)
        if filled.arguments is None:
            error = f"attempt {attempt + 1}: {filled.error}"
            continue
        arguments = filled.arguments
        result = sandbox.run(tool.code, arguments, entry=tool.entry)
        tool_cpu += result.cpu_seconds
        tool_wall += result.wall_seconds
        if result.ok and result.value is not None:
            return ToolAnswer(ok=True, value=result.value, arguments=arguments, attempts=attempt + 1, usage=usage,
                              tool_cpu_seconds=tool_cpu, tool_wall_seconds=tool_wall, fill_modes=modes)
        why = f"{result.error_kind}: {result.message}" if not result.ok else "the tool returned nothing"
        error = f"attempt {attempt + 1}: tool {tool.name} failed ({why})"
    return ToolAnswer(ok=False, arguments=arguments, error=error, attempts=retries + 1, usage=usage,
                      tool_cpu_seconds=tool_cpu, tool_wall_seconds=tool_wall, fill_modes=modes)


class DirectAnswer(BaseModel):
    """A model's own answer to a question, without a tool (not tool-backed): the answer cut out of its reply
    by the rules in answerform ("" when there is none), and the full reply."""

    answer: Any
    text: str
    usage: Usage = Usage()


def direct_messages(question: str) -> list[Message]:
    return [{"role": "system", "content": prompts.render(DIRECT_TEMPLATE)}, {"role": "user", "content": question}]


def answer_directly(model: ChatModel, question: str, *, seed: int, max_tokens: int = DIRECT_MAX_TOKENS) -> DirectAnswer:
    """Ask `model` for a short worked answer ending in 'Answer: ...' and cut out the answer the question asks
    for (answerform's rules); a reply cut off by the token limit before any 'Answer:' gives an empty answer (not
    a fragment of working)."""
    reply = model.chat(direct_messages(question), seed=seed, temperature=0.0, max_tokens=max_tokens)
    if reply.finish_reason == "length" and not re.search(r"answer\s*(?:is)?\s*[:=]", reply.text, re.IGNORECASE):
        return DirectAnswer(answer="", text=reply.text, usage=reply.usage)  # cut off before it answered
    return DirectAnswer(answer=answerform.direct_answer(question, reply.text), text=reply.text, usage=reply.usage)


__all__ = ["Filled", "fill_messages", "fill_prefix", "fill_arguments", "fill_start", "forget_fill_misses",
           "replay_fill_modes", "FREE_THEN_SCHEMA", "schema_problem", "normalise",
           "answers_match", "as_number", "REL_TOL", "DIRECT_MAX_TOKENS",
           "extract_answer", "token_budget", "Tool", "ToolAnswer", "answer_with_tool", "DirectAnswer",
           "direct_messages", "answer_directly"]
