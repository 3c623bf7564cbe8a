"""The executor's step: fill a tool's arguments from a question under its JSON Schema, call the tool in the
sandbox, and normalise the value into an answer. Also the pure answer-comparison rules used everywhere."""

from __future__ import annotations

import json
import math
import re
from typing import Any

import jsonschema
from pydantic import BaseModel

from . import prompts
from .llm import ChatModel, Message
from .meter import Usage
from .tools import Card, Tool

EXECUTOR_TEMPLATE = "executor_fill.j2"


class Filled(BaseModel):
    """The executor's argument object for one question (or why there is none) and what it cost."""

    arguments: dict[str, Any] | None
    error: str | None = None
    usage: Usage = Usage()
    raw: str = ""


def fill_messages(card: Card, question: str) -> list[Message]:
    """Few-shot chat: the card's demos as earlier turns, so every question of one tool shares the prefix."""
    msgs: list[Message] = [{"role": "system", "content": prompts.render(EXECUTOR_TEMPLATE, card=card)}]
    for demo in card.demos:
        msgs.append({"role": "user", "content": demo.question})
        msgs.append({"role": "assistant", "content": json.dumps(demo.arguments, ensure_ascii=False)})
    msgs.append({"role": "user", "content": question})
    return msgs


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


def fill_arguments(model: ChatModel, card: Card, question: str, *, seed: int,
                   temperature: float = 0.0) -> Filled:
    """Ask the executor for the argument object of `question`, constrained by the card's schema."""
    reply = model.chat(fill_messages(card, question), seed=seed, temperature=temperature,
                       max_tokens=token_budget(card), schema=card.schema_)
    try:
        args = json.loads(reply.text)
    except ValueError:
        return Filled(arguments=None, error=f"executor reply is not JSON ({reply.finish_reason}): {reply.text[:80]!r}",
                      usage=reply.usage, raw=reply.text)
    problem = schema_problem(card.schema_, args)
    if problem:
        return Filled(arguments=None, error=problem, usage=reply.usage, raw=reply.text)
    return Filled(arguments=args, usage=reply.usage, raw=reply.text)


# ---- answers ----------------------------------------------------------------------------------------------

_WORDS = {"yes": "yes", "true": "yes", "valid": "yes", "no": "no", "false": "no", "invalid": "no"}


def normalise(value: Any) -> str:
    """A canonical text form for comparing answers: case, spacing, articles, trailing dots and number forms
    do not matter; lists compare element-wise in order."""
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        if isinstance(value, float) and math.isfinite(value) and value == int(value):
            value = int(value)
        return str(value) if isinstance(value, int) else f"{value:.6g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(normalise(v) for v in value)
    if value is None:
        return ""
    text = re.sub(r"\s+", " ", str(value)).strip().strip(".").strip().casefold()
    text = re.sub(r"^(the|a|an) ", "", text)
    if re.fullmatch(r"-?\d+(\.\d+)?", text):
        return normalise(float(text))
    return _WORDS.get(text, text)


def answers_match(expected: Any, got: Any) -> bool:
    return normalise(expected) == normalise(got)


def extract_answer(text: str) -> str:
    """The answer part of a free-text model reply: after the last 'Answer:' if present, else the last line."""
    m = list(re.finditer(r"answer\s*(?:is)?\s*[:=]\s*(.+)", text, flags=re.IGNORECASE))
    if m:
        return m[-1].group(1).strip().strip("*").strip()
    lines = [ln.strip() for ln in text.strip().splitlines() if ln.strip()]
    return lines[-1] if lines else ""


__all__ = ["Filled", "fill_messages", "fill_arguments", "schema_problem", "normalise", "answers_match",
           "extract_answer", "token_budget", "Tool"]
