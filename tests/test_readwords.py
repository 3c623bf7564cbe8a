"""Declared conversions of values written in words, checked against python-dateutil's date parser (a reference
library) for dates, and against the English number names (common practice) for number words."""

from __future__ import annotations

import datetime

import pytest
from dateutil import parser as dateparser

from runner import readwords as R
from runner.sandbox import screen
from runner.shapecheck import unify_keys


@pytest.mark.parametrize("text", ["29th December 2026", "Saturday 30 January 2027", "31st of August 2028",
                                  "March 3, 2027", "2 Feb 2026", "Sept 14, 2030", "1st May 2026"])
def test_month_dates_read_as_dateutil_reads_them(text):
    expected = dateparser.parse(text.replace(" of ", " "), default=datetime.datetime(2000, 1, 1)).date().isoformat()
    assert R.read_month_date(text) == expected


@pytest.mark.parametrize("text,value", [("eleven", 11), ("Twenty-one", 21), ("ninety nine", 99), ("zero", 0),
                                        ("one hundred", 100), ("forty", 40)])
def test_number_words(text, value):
    assert R.read_number_word(text) == value


def test_not_words_are_left_alone():
    assert R.read_number_word("Petrel") is None and R.read_month("Mark") is None
    assert R.read_month_date("2026-12-29") is None and R.read_value("Petrel", "month-date") == "Petrel"
    assert R.read_value(12, "number-word") == 12


def test_conversions_are_declared_only_where_every_value_is_of_one_kind():
    objects = [{"boats": [{"name": "Auk", "n": "eleven"}, {"name": "Tern", "n": 3}], "month": "March"},
               {"boats": [{"name": "Smew", "n": 4}], "month": "Sept"}]
    raw, converted, conv = R.convert_objects(objects)
    assert conv == {"boats[].n": "number-word", "month": "month"}
    assert converted[0]["boats"][0]["n"] == 11 and converted[1]["month"] == 9 and raw[0]["boats"][0]["n"] == "eleven"
    assert R.convert_questions(["Auk landed eleven in March."], raw, converted) == ["Auk landed 11 in 3."]


def test_the_copied_tool_code_passes_the_sandbox_screen():
    code = R.wrap_tool("def solve(n):\n    return n * 2\n", {"n": "number-word"})
    assert screen(code, entry="solve") == []


def test_unify_keys_renames_one_field_named_two_ways():
    objects = [{"lengths": [3, 4], "unit": "m"}, {"sizes": [5], "unit": "m"}, {"lengths": [1], "unit": "cm"}]
    assert unify_keys(objects) == [{"lengths": [3, 4], "unit": "m"}, {"lengths": [5], "unit": "m"},
                                   {"lengths": [1], "unit": "cm"}]
    # inside lists too; an ambiguous rename (two fields of one type missing) is left alone
    items = [{"log": [{"boat": "Auk", "boxes": 3}, {"vessel": "Tern", "boxes": 2}, {"boat": "Smew", "boxes": 1}]}]
    assert unify_keys(items * 2)[0]["log"][1] == {"boat": "Tern", "boxes": 2}
    odd = [{"a": "x", "b": "y"}, {"a": "x", "b": "y"}, {"c": "x", "d": "y"}]
    assert unify_keys(odd) == odd
    # three names for one list, one per question: the first question's name
    three = [{"entries": [1]}, {"landings": [2, 3]}, {"records": []}]
    assert unify_keys(three) == [{"entries": [1]}, {"entries": [2, 3]}, {"entries": []}]


def test_a_conversion_at_a_place_the_schema_lacks_is_skipped():
    schema = {"type": "object", "properties": {"start": {"type": "string", "pattern": "x"}}}
    assert R.loosen_schema(schema, {"gone": "month-date", "start": "month-date"}) == \
        {"type": "object", "properties": {"start": {"type": "string"}}}
