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


@pytest.mark.parametrize("text", ["116 gallons", "1,250 litres", "7.5 metres", "-3 kelvin", "9 knots",
                                  "40 fathoms"])
def test_quantities_with_a_unit_read_as_pint_reads_their_magnitude(text):
    import pint  # a reference library for quantities with units

    expected = pint.UnitRegistry().Quantity(text.replace(",", "")).magnitude
    assert R.read_quantity(text) == expected and type(R.read_quantity(text)) is type(expected)


def test_quantities_with_a_currency_sign_or_percent():
    # common practice: the sign or unit goes, the number stays as written (a decimal point makes it a float)
    assert R.read_quantity("£13.85") == 13.85 and R.read_quantity("2.5%") == 2.5 and R.read_quantity("$4") == 4
    # a bare number may be a code (leading zeros, check digits), and two numbers are not one quantity
    assert R.read_quantity("0042") is None and R.read_quantity("11 fathoms 5 feet") is None
    assert R.read_quantity("GEAU6884929") is None and R.read_quantity("12:30") is None


def test_quantities_are_converted_only_where_sign_and_unit_agree():
    same = [{"fuel": "116 gallons"}, {"fuel": "191 gallons"}, {"fuel": "123 imperial gallons"}]
    raw, converted, conv = R.convert_objects(same)
    assert conv == {"fuel": "quantity"} and [o["fuel"] for o in converted] == [116, 191, 123]
    assert R.convert_objects([{"d": "3 metres"}, {"d": "12 feet"}])[2] == {}  # the unit is data there
    assert R.convert_objects([{"d": "£3"}, {"d": "€12"}])[2] == {}
    assert R.convert_questions(["Bill 1,250 litres at £0.85."], [{"v": "1,250 litres"}], [{"v": 1250}]) == \
        ["Bill 1250 litres at £0.85."]


def test_a_tool_with_a_quantity_conversion_runs_in_the_sandbox():
    from runner.sandbox import Sandbox

    code = R.wrap_tool("def solve(fuel):\n    return fuel * 2\n", {"fuel": "quantity"})
    assert screen(code, entry="solve") == []
    with Sandbox(pool_size=1) as sandbox:
        result = sandbox.run(code, {"fuel": "£1,250.50"})
    assert result.ok and result.value == 2501.0
