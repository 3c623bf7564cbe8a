"""What an argument schema forces next: a character-level cursor over the JSON text of a reply.

The executor's reply is JSON written the way the card's demos are (`json.dumps` spacing: ", " and ": ").
Given the text so far, the cursor says whether it is still the start of a reply that fits the schema, and which
characters every such reply must continue with (keys, quotes, separators, closing brackets). Those can be
appended to the model's context in one batch instead of being sampled one token at a time; the model is left
with the values and the choices the schema leaves open (another list item or the end of the list).

Only the schemas `shapecheck.infer_schema` writes are handled (objects whose keys are all required and closed,
arrays, strings with an optional pattern of character classes, integers, numbers, booleans, null);
`supported` says whether a schema is one of them. A string may also carry `x-copy-from` (this module's own
keyword, set per question by `copy_schema`): its value must then be a piece of that text that starts and ends
at word boundaries, so a code or a name is copied, never misspelt. The accepted text is the part of the
schema's llama.cpp grammar that uses the demos' spacing, so a reply this cursor accepts also fits the grammar."""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

# A frame of the parser's stack; the stack is a tuple, so a cursor is immutable and cheap to branch.
Frame = tuple

_DIGITS = frozenset("0123456789")
_ESCAPES = frozenset('"\\/bfnrt')
_HEX = frozenset("0123456789abcdefABCDEF")
_MAX_INT_DIGITS = 16  # the grammar's integral part: one digit, or a non-zero digit and up to 15 more


# ---- string patterns: a sequence of character classes with repeat counts ----------------------------------

def _char_class(body: str) -> frozenset[str] | None:
    """The characters of a regex class body like `0-9` or `A-Za-z_` (no negation, no escapes)."""
    if not body or body.startswith("^") or "\\" in body:
        return None
    chars: set[str] = set()
    i = 0
    while i < len(body):
        if i + 2 < len(body) and body[i + 1] == "-":
            lo, hi = body[i], body[i + 2]
            if ord(lo) > ord(hi):
                return None
            chars.update(chr(c) for c in range(ord(lo), ord(hi) + 1))
            i += 3
        else:
            chars.add(body[i])
            i += 1
    return frozenset(chars)


_STEP = re.compile(r"(\[[^\]]*\]|[A-Za-z0-9 :/._-])(\{(\d+)(?:,(\d+))?\}|\?|)")


def pattern_steps(pattern: str) -> tuple[tuple[frozenset[str], int, int], ...] | None:
    """`^[0-9]{4}-[0-9]{2}$` as ((digits, 4, 4), ({'-'}, 1, 1), (digits, 2, 2)); None for anything richer
    (alternation, groups, open repeats) or when two neighbouring steps share a character (then matching one
    character at a time could need to look back)."""
    if not (pattern.startswith("^") and pattern.endswith("$")):
        return None
    body, pos, steps = pattern[1:-1], 0, []
    while pos < len(body):
        m = _STEP.match(body, pos)
        if not m:
            return None
        atom, rep, lo, hi = m.group(1), m.group(2), m.group(3), m.group(4)
        chars = _char_class(atom[1:-1]) if atom.startswith("[") else frozenset(atom)
        if chars is None:
            return None
        if rep == "?":
            n_min, n_max = 0, 1
        elif lo is not None:
            n_min, n_max = int(lo), int(hi) if hi is not None else int(lo)
        else:
            n_min = n_max = 1
        if n_max < n_min or n_max == 0:
            return None
        if steps and steps[-1][0] & chars:
            return None
        steps.append((chars, n_min, n_max))
        pos = m.end()
    return tuple(steps)


def supported(schema: Any) -> bool:
    """True for the schemas this cursor walks (what shapecheck.infer_schema writes)."""
    if not isinstance(schema, dict):
        return False
    kind = schema.get("type")
    allowed = {"type", "properties", "required", "additionalProperties", "items", "pattern", "description",
               "title", COPY}
    if set(schema) - allowed:
        return False
    if kind == "object":
        props = schema.get("properties", {})
        return (isinstance(props, dict) and schema.get("additionalProperties") is False
                and list(schema.get("required", [])) == list(props)  # every key required, in order
                and all(supported(v) for v in props.values()))
    if kind == "array":
        return "items" in schema and supported(schema["items"])
    if kind == "string":
        if COPY in schema:
            return "pattern" not in schema and isinstance(schema[COPY], str)
        return "pattern" not in schema or pattern_steps(schema["pattern"]) is not None
    return kind in ("integer", "number", "boolean", "null") and "pattern" not in schema and COPY not in schema


# ---- strings copied from the question ---------------------------------------------------------------------

COPY = "x-copy-from"


def _word_start(source: str, i: int) -> bool:
    return i == 0 or not source[i - 1].isalnum() or not source[i].isalnum()


def _piece(source: str, piece: str, whole: bool) -> bool:
    """Whether `piece` is found in `source` starting at a word boundary and, when `whole`, also ending at one
    (without `whole`: it may still grow into such a piece)."""
    i = source.find(piece)
    while i != -1:
        end = i + len(piece)
        if _word_start(source, i) and (not whole or end == len(source) or not source[end].isalnum()
                                       or not source[end - 1].isalnum()):
            return True
        i = source.find(piece, i + 1)
    return False


def copyable(value: Any, source: str) -> bool:
    """A string value that a copy constraint allows: a whole-word piece of `source`, with nothing that JSON
    would escape."""
    return (isinstance(value, str) and value != "" and _piece(source, value, whole=True)
            and not any(c in value for c in '"\\') and all(c >= " " for c in value))


def copied_paths(schema: dict[str, Any], demos: list[tuple[str, Any]]) -> set[str]:
    """The places of plain string values (paths as `shapecheck.value_paths` writes them) where every value
    in every demo is copied whole from its question; at least two demos must show a value there."""
    from .shapecheck import value_paths

    places: set[str] = set()

    def walk(node: dict[str, Any], path: str) -> None:
        kind = node.get("type")
        if kind == "string" and "pattern" not in node:
            places.add(path)
        elif kind == "object":
            for key, sub in node.get("properties", {}).items():
                walk(sub, f"{path}.{key}" if path else key)
        elif kind == "array" and isinstance(node.get("items"), dict):
            walk(node["items"], path + "[]")

    walk(schema, "")
    seen: dict[str, set[int]] = {}
    bad: set[str] = set()
    for n, (question, arguments) in enumerate(demos):
        for path, value in value_paths(arguments):
            if path not in places:
                continue
            seen.setdefault(path, set()).add(n)
            if not copyable(value, question):
                bad.add(path)
    return {p for p, shown in seen.items() if len(shown) >= 2 and p not in bad}


def copy_schema(schema: dict[str, Any], paths: set[str], question: str) -> dict[str, Any]:
    """`schema` with the strings at `paths` constrained to whole-word pieces of `question`."""
    if not paths:
        return schema

    def walk(node: dict[str, Any], path: str) -> dict[str, Any]:
        kind = node.get("type")
        if kind == "string" and path in paths:
            return {**node, COPY: question}
        if kind == "object":
            return {**node, "properties": {k: walk(v, f"{path}.{k}" if path else k)
                                           for k, v in node.get("properties", {}).items()}}
        if kind == "array" and isinstance(node.get("items"), dict):
            return {**node, "items": walk(node["items"], path + "[]")}
        return node

    return walk(schema, "")


# ---- the cursor ---------------------------------------------------------------------------------------------

def _value(schema: dict[str, Any]) -> Frame:
    return ("val", schema)


def _lit(text: str) -> Frame:
    return ("lit", text, 0)


def _key_literal(key: str, first: bool) -> str:
    import json

    return ("" if first else ", ") + json.dumps(key, ensure_ascii=False) + ": "


def _feed(stack: tuple[Frame, ...], ch: str) -> tuple[Frame, ...] | None:
    """The stack after one more character, or None when the character cannot come next."""
    if not stack:
        return None  # the reply is complete: nothing may follow
    top, rest = stack[-1], stack[:-1]
    kind = top[0]
    if kind == "lit":
        text, i = top[1], top[2]
        if text[i] != ch:
            return None
        return rest if i + 1 == len(text) else rest + (("lit", text, i + 1),)
    if kind == "val":
        schema = top[1]
        t = schema["type"]
        if t == "object":
            if ch != "{":
                return None
            keys = list(schema["properties"])
            if not keys:
                return rest + (_lit("}"),)
            return rest + (("obj", schema, 0), _value(schema["properties"][keys[0]]), _lit(_key_literal(keys[0], True)))
        if t == "array":
            return rest + (("arr", schema["items"], "open"),) if ch == "[" else None
        if t == "string":
            if ch != '"':
                return None
            if COPY in schema:
                return rest + (("cpy", schema[COPY], ""),)
            steps = pattern_steps(schema["pattern"]) if "pattern" in schema else None
            return rest + (("str", steps, 0, 0, 0),)
        if t in ("integer", "number"):
            return _feed(rest + (("num", t == "integer", "start", 0),), ch)
        if t == "boolean":
            return rest + (_lit("rue"),) if ch == "t" else rest + (_lit("alse"),) if ch == "f" else None
        if t == "null":
            return rest + (_lit("ull"),) if ch == "n" else None
        return None
    if kind == "obj":
        schema, idx = top[1], top[2]
        keys = list(schema["properties"])
        if idx + 1 < len(keys):
            nxt = keys[idx + 1]
            return _feed(rest + (("obj", schema, idx + 1), _value(schema["properties"][nxt]),
                                 _lit(_key_literal(nxt, False))), ch)
        return _feed(rest + (_lit("}"),), ch)
    if kind == "arr":
        items, phase = top[1], top[2]
        if ch == "]":
            return rest
        if phase == "open":
            return _feed(rest + (("arr", items, "after"), _value(items)), ch)
        if ch == ",":
            return rest + (("arr", items, "after"), _value(items), _lit(" "))
        return None
    if kind == "str":
        return _feed_string(top, rest, ch)
    if kind == "cpy":
        source, text = top[1], top[2]
        if ch == '"':
            return rest if text and _piece(source, text, whole=True) else None
        if ch == "\\" or ch < " ":
            return None
        return rest + (("cpy", source, text + ch),) if _piece(source, text + ch, whole=False) else None
    if kind == "num":
        return _feed_number(top, rest, ch)
    raise AssertionError(f"unknown frame {kind}")


def _feed_string(top: Frame, rest: tuple[Frame, ...], ch: str) -> tuple[Frame, ...] | None:
    _, steps, step, count, esc = top
    if esc == 1:  # after a backslash
        if ch == "u":
            return rest + (("str", steps, step, count, 2),)
        if ch in _ESCAPES and steps is None:
            return rest + (("str", steps, step, count, 0),)
        return None
    if esc >= 2:  # in the four hex digits of \uXXXX
        if ch not in _HEX:
            return None
        return rest + (("str", steps, step, count, 0 if esc == 5 else esc + 1),)
    if steps is None:
        if ch == '"':
            return rest
        if ch == "\\":
            return rest + (("str", steps, step, count, 1),)
        return rest + (("str", steps, step, count, 0),)
    # a pattern: match one step at a time (neighbouring steps share no character)
    while step < len(steps):
        chars, n_min, n_max = steps[step]
        if count < n_max and ch in chars:
            return rest + (("str", steps, step, count + 1, 0),)
        if count < n_min:
            return None
        step, count = step + 1, 0
    return rest if ch == '"' else None


def _feed_number(top: Frame, rest: tuple[Frame, ...], ch: str) -> tuple[Frame, ...] | None:
    """Integers as the grammar writes them (`-`? then 0 or up to 16 digits); numbers may add a fraction and an
    exponent. A character that cannot extend a complete number ends it and goes to the frame below."""
    _, integer, phase, n = top
    if phase == "start":
        if ch == "-":
            return rest + (("num", integer, "sign", 0),)
        phase = "sign"
    if phase == "sign":
        if ch == "0":
            return rest + (("num", integer, "zero", 1),)
        if ch in _DIGITS:
            return rest + (("num", integer, "int", 1),)
        return None
    if phase in ("zero", "int") and ch in _DIGITS and phase == "int" and n < _MAX_INT_DIGITS:
        return rest + (("num", integer, "int", n + 1),)
    if not integer:
        if phase in ("zero", "int") and ch == ".":
            return rest + (("num", integer, "dot", 0),)
        if phase in ("dot", "frac") and ch in _DIGITS and n < _MAX_INT_DIGITS:
            return rest + (("num", integer, "frac", n + 1),)
        if phase in ("zero", "int", "frac") and ch in "eE":
            return rest + (("num", integer, "e", 0),)
        if phase == "e" and ch in "+-":
            return rest + (("num", integer, "esign", 0),)
        if phase in ("e", "esign", "exp") and ch in _DIGITS and n < _MAX_INT_DIGITS:
            return rest + (("num", integer, "exp", n + 1),)
    if phase in ("zero", "int", "frac", "exp"):
        return _feed(rest, ch)  # the number is complete; the character belongs to what follows
    return None


def _next_char(stack: tuple[Frame, ...]) -> str | None:
    """The one character that must come next, or None when there is a choice (or nothing may follow)."""
    if not stack:
        return None
    top = stack[-1]
    kind = top[0]
    if kind == "lit":
        return top[1][top[2]]
    if kind == "val":
        return {"object": "{", "array": "[", "string": '"', "null": "n"}.get(top[1]["type"])
    if kind == "obj":
        return "," if top[2] + 1 < len(top[1]["properties"]) else "}"
    if kind == "str" and top[1] is not None and top[4] == 0:
        steps, step, count = top[1], top[2], top[3]
        if step < len(steps):
            chars, n_min, n_max = steps[step]
            if len(chars) == 1 and count < n_min:
                return next(iter(chars))
            if count >= n_max and step + 1 < len(steps) and len(steps[step + 1][0]) == 1 and steps[step + 1][1] > 0:
                return next(iter(steps[step + 1][0]))
            if count >= n_max and step + 1 == len(steps):
                return '"'
    return None


@dataclass(frozen=True)
class Cursor:
    """Where a reply stands against its schema. `feed` gives the cursor after more text (None: the text cannot
    continue a fitting reply); `forced` is the text every fitting continuation starts with; `done` is true once
    the top-level object is closed."""

    stack: tuple[Frame, ...]

    @classmethod
    def start(cls, schema: dict[str, Any]) -> "Cursor":
        if not supported(schema):
            raise ValueError("schema not supported by the forced-span cursor")
        return cls((_value(schema),))

    @property
    def done(self) -> bool:
        return not self.stack

    def feed(self, text: str) -> "Cursor | None":
        stack: tuple[Frame, ...] | None = self.stack
        for ch in text:
            stack = _feed(stack, ch)
            if stack is None:
                return None
        return Cursor(stack)

    def forced(self) -> str:
        out = []
        stack = self.stack
        while True:
            ch = _next_char(stack)
            if ch is None:
                return "".join(out)
            out.append(ch)
            nxt = _feed(stack, ch)
            assert nxt is not None
            stack = nxt

    def choice(self) -> tuple[str, Any]:
        """What the open choice at this point is about: ("string", pattern steps or None) inside a string,
        ("number", integer?) at or in a number, ("array", item schema) at a list's next item or its end,
        ("other", None) otherwise (a boolean, or the reply is complete)."""
        if not self.stack:
            return "other", None
        top = self.stack[-1]
        if top[0] in ("str", "cpy"):
            return "string", None if top[0] == "cpy" else top[1]
        if top[0] == "num":
            return "number", top[1]
        if top[0] == "val" and top[1]["type"] in ("integer", "number"):
            return "number", top[1]["type"] == "integer"
        if top[0] == "arr":
            return "array", top[1]
        return "other", None

    def in_string(self) -> bool:
        """Inside a string's characters (where any text may come, so multi-byte characters are possible)."""
        return bool(self.stack) and self.stack[-1][0] in ("str", "cpy")


# Characters that stand for every class of text that may follow a forced span: where the span ends, the
# tokenizer may merge its last characters with what follows (`": ` and `-5` give `":` and ` -`), so only the
# tokens that every such continuation shares are appended.
PROBES = ("a", "A", "1", "0", "-", " ", '"', "{", "}", "[", "]", ",", ".", "_", "\\", "é")


def continuations(cursor: Cursor) -> list[str]:
    """The probe characters that may follow at `cursor`."""
    return [p for p in PROBES if cursor.feed(p) is not None]


__all__ = ["Cursor", "supported", "pattern_steps", "continuations", "PROBES", "COPY", "copyable", "copied_paths",
           "copy_schema"]
