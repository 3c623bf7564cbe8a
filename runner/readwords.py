"""Declared conversions of values written in words: number words ("eleven"), month names ("March"), dates
with month names ("29th December 2026", "March 3, 2027") and quantities written with their unit or currency
sign ("116 gallons", "£13.85", "2.5%") read as numbers and ISO dates.

A shape proposal copies values as the question writes them; where every value at one place in the arguments is
of one such kind, the build converts them there (the drafts see numbers and YYYY-MM-DD dates), the usage card
keeps them as written (the executor copies, never converts), and the tool carries the same conversion, declared
by place and kind, in front of the builder's function. The functions between the two markers below are copied
into such tools as they are, so they use only `re` and no names the sandbox screen refuses.
"""

from __future__ import annotations

import copy
import inspect
import re
from typing import Any

from .shapecheck import value_paths

KINDS = ("number-word", "month", "month-date", "quantity")

# ---- tool side (copied into tools) -------------------------------------------------------------------------
# words-begin
WORD_UNITS = {"zero": 0, "one": 1, "two": 2, "three": 3, "four": 4, "five": 5, "six": 6, "seven": 7, "eight": 8,
              "nine": 9, "ten": 10, "eleven": 11, "twelve": 12, "thirteen": 13, "fourteen": 14, "fifteen": 15,
              "sixteen": 16, "seventeen": 17, "eighteen": 18, "nineteen": 19}
WORD_TENS = {"twenty": 20, "thirty": 30, "forty": 40, "fifty": 50, "sixty": 60, "seventy": 70, "eighty": 80,
             "ninety": 90}
MONTH_NAMES = ["january", "february", "march", "april", "may", "june", "july", "august", "september", "october",
               "november", "december"]
WEEKDAY_WORDS = r"(?:(?:mon|tues|wednes|thurs|fri|satur|sun)day,?\s+)?"
ORDINAL = r"(\d{1,2})(?:st|nd|rd|th)?"


def read_number_word(text):
    """'eleven' -> 11, 'twenty-one' -> 21, 'a hundred' / 'one hundred' -> 100; None if it is not one."""
    words = text.strip().lower().replace("-", " ").split()
    if words[:1] in (["a"], ["one"]) and words[1:] == ["hundred"]:
        return 100
    if len(words) == 1 and words[0] in WORD_UNITS:
        return WORD_UNITS[words[0]]
    if len(words) == 1 and words[0] in WORD_TENS:
        return WORD_TENS[words[0]]
    if len(words) == 2 and words[0] in WORD_TENS and words[1] in WORD_UNITS and 0 < WORD_UNITS[words[1]] < 10:
        return WORD_TENS[words[0]] + WORD_UNITS[words[1]]
    return None


def read_month(text):
    """'March' or 'Mar' or 'Sept' -> 3 / 3 / 9; None if it is not a month name."""
    word = text.strip().lower().rstrip(".")
    for number, name in enumerate(MONTH_NAMES, 1):
        if len(word) >= 3 and name.startswith(word):
            return number
    return None


def month_date_pattern():
    """Day-month-year ('29th of December 2026', 'Saturday 30 January 2027') or month-day-year
    ('December 29, 2026')."""
    month = r"([A-Za-z]{3,9})\.?"
    return (r"\b" + WEEKDAY_WORDS + r"(?:" + ORDINAL + r"\s+(?:of\s+)?" + month + r",?\s+(\d{4})"
            + r"|" + month + r"\s+" + ORDINAL + r",?\s+(\d{4}))\b")


def iso_from_match(found):
    """The ISO date (YYYY-MM-DD) of a month_date_pattern match, or None if the month word is not a month."""
    if found.group(1):
        day, month, year = found.group(1), found.group(2), found.group(3)
    else:
        month, day, year = found.group(4), found.group(5), found.group(6)
    number = read_month(month)
    if number is None or not 1 <= int(day) <= 31:
        return None
    return year + "-" + str(number).zfill(2) + "-" + day.zfill(2)


def read_month_date(text):
    """'29th December 2026' -> '2026-12-29'; None unless the whole text is one such date."""
    found = re.fullmatch(month_date_pattern(), text.strip(), re.IGNORECASE)
    return iso_from_match(found) if found else None


QUANTITY = r"([£$€]?)\s*(-?\d{1,3}(?:,\d{3})+(?:\.\d+)?|-?\d+(?:\.\d+)?)\s*([A-Za-z%][A-Za-z%.' -]*)?"


def read_quantity(text):
    """'116 gallons' -> 116, '£13.85' -> 13.85, '2.5%' -> 2.5, '1,250 litres' -> 1250: one number with a
    currency sign before it or a unit after it; None otherwise (a bare number stays text: it may be a code)."""
    found = re.fullmatch(QUANTITY, text.strip())
    if not found or not (found.group(1) or found.group(3)):
        return None
    digits = found.group(2).replace(",", "")
    return float(digits) if "." in digits else int(digits)


def read_value(value, kind):
    """One value converted by the declared kind; values already converted (or not of that kind) are kept."""
    if not isinstance(value, str):
        return value
    if kind == "number-word":
        got = read_number_word(value)
    elif kind == "month":
        got = read_month(value)
    elif kind == "quantity":
        got = read_quantity(value)
    else:
        got = read_month_date(value)
    return value if got is None else got


def convert_at(value, steps, kind):
    """`value` with the values at the place `steps` (keys, with '[]' for every list item) converted."""
    if not steps:
        return read_value(value, kind)
    step, rest = steps[0], steps[1:]
    if step == "[]":
        return [convert_at(item, rest, kind) for item in value] if isinstance(value, list) else value
    if isinstance(value, dict) and step in value:
        out = dict(value)
        out[step] = convert_at(value[step], rest, kind)
        return out
    return value


def convert_arguments(arguments, conversions):
    """The argument object with every declared conversion ({place: kind}) applied."""
    for place, kind in conversions.items():
        arguments = convert_at(arguments, place.replace("[]", ".[]").split(".") if place else [], kind)
    return arguments
# words-end


# ---- build side ---------------------------------------------------------------------------------------------

def _steps(path: str) -> list[str]:
    return [s for s in path.replace("[]", ".[]").split(".") if s]


def _reader(kind: str):
    return {"number-word": read_number_word, "month": read_month, "month-date": read_month_date,
            "quantity": read_quantity}[kind]


def quantity_unit(text: str) -> tuple[str, str]:
    """The currency sign and the last word of the unit of a quantity ('123 imperial gallons' -> ('', 'gallons'))."""
    found = re.fullmatch(QUANTITY, text.strip())
    unit = (found.group(3) or "").strip().lower().split() if found else []
    return (found.group(1) if found else "", unit[-1].rstrip(".") if unit else "")


def declared_conversions(objects: list[Any]) -> dict[str, str]:
    """For each place where every string value is of one kind (number word, month name, date with a month
    name, quantity), that kind. Places with any other string are left alone, and so are quantities whose
    currency sign or unit differs between values (metres beside feet: the unit is data there)."""
    by_path: dict[str, list[str]] = {}
    for obj in objects:
        for path, text in value_paths(obj):
            if path and isinstance(text, str):
                by_path.setdefault(path, []).append(text)
    out = {}
    for path, texts in by_path.items():
        for kind in KINDS:
            if all(_reader(kind)(t) is not None for t in texts):
                if kind == "quantity" and len({quantity_unit(t) for t in texts}) > 1:
                    break
                out[path] = kind
                break
    return out


def convert_objects(objects: list[Any]) -> tuple[list[Any], list[Any], dict[str, str]]:
    """(as written, converted, {place: kind}); unchanged copies when nothing is of a declared kind or the
    objects are not all objects."""
    if not all(isinstance(o, dict) for o in objects):
        return objects, objects, {}
    conversions = declared_conversions(objects)
    converted = [convert_arguments(copy.deepcopy(o), conversions) for o in objects]
    return objects, converted, conversions


def convert_questions(questions: list[str], raw: list[Any], converted: list[Any]) -> list[str]:
    """The questions with values of the kinds converted in `converted` written the same way (so the copy
    checks compare like with like): number words as digits, month names as numbers, dates as YYYY-MM-DD."""
    kinds = set(declared_conversions(raw).values()) if raw is not converted else set()
    out = []
    for q in questions:
        if "month-date" in kinds:
            q = re.sub(month_date_pattern(), lambda m: iso_from_match(m) or m.group(0), q, flags=re.IGNORECASE)
        if "number-word" in kinds:
            q = re.sub(r"\b(?:(?:" + "|".join(WORD_TENS) + r")[- ](?:" + "|".join(list(WORD_UNITS)[1:10])
                       + r")|" + "|".join(list(WORD_TENS) + list(WORD_UNITS)) + r")\b",
                       lambda m: str(read_number_word(m.group(0))), q, flags=re.IGNORECASE)
        if "quantity" in kinds:  # thousands separators dropped, as the converted numbers have none
            q = re.sub(r"(?<=\d),(?=\d{3}\b)", "", q)
        if "month" in kinds:
            q = re.sub(r"\b(" + "|".join(n.capitalize() for n in MONTH_NAMES) + r")\b",
                       lambda m: str(read_month(m.group(0))), q)
        out.append(q)
    return out


def loosen_schema(schema: dict[str, Any], conversions: dict[str, str]) -> dict[str, Any]:
    """The schema with converted places accepting the value as written too (the executor copies words)."""
    if not conversions:
        return schema
    schema = copy.deepcopy(schema)
    for path, kind in conversions.items():
        node, parent, last = schema, None, None
        for step in _steps(path):
            parent, last = node, step
            node = node.get("items", {}) if step == "[]" else node.get("properties", {}).get(step, {})
        if parent is None or not node:
            continue
        target = parent["items"] if last == "[]" else parent["properties"][last]
        target.clear()
        target["type"] = ("string" if kind == "month-date" else ["number", "string"] if kind == "quantity"
                          else ["integer", "string"])
    return schema


def tool_source() -> str:
    """The tool-side functions, as copied into a tool."""
    text = inspect.getsource(inspect.getmodule(convert_arguments))
    return text[text.index("# words-begin") + len("# words-begin\n"): text.index("# words-end")]


def wrap_tool(code: str, conversions: dict[str, str]) -> str:
    """The builder's code with its `solve` renamed and a `solve` in front that applies the declared
    conversions first."""
    inner = re.sub(r"^def solve\(", "def solve_converted(", code, flags=re.M)
    inner = re.sub(r"(?<![\w.])solve\(\*\*", "solve_converted(**", inner)
    return (inner.rstrip() + "\n\n\n# Values written in words or with units are read as numbers and dates (declared by place):\n"
            + f"import re\n\nCONVERSIONS = {conversions!r}\n\n" + tool_source()
            + "\n\ndef solve(**arguments):\n    return solve_converted(**convert_arguments(arguments, CONVERSIONS))\n")
