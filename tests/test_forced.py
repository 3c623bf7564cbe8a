"""Forced spans and drafts of executor replies: the schema cursor checked against the jsonschema library (a
reply text the cursor accepts is one jsonschema accepts, and the other way round, for JSON written with the
demos' spacing), value scanning checked against Python's json module, and the real executor's forced-span
reply checked against its sampled reply (free when that fits the schema, else under llama.cpp's grammar)."""

from __future__ import annotations

import json
import random
from pathlib import Path

import jsonschema
import pytest

from runner.guess import Drafter, scan_values, shape
from runner import forced
from runner.forced import Cursor, pattern_steps, supported
from runner.shapecheck import infer_schema

ROOT_DIR = Path(__file__).resolve().parent.parent
BOATS = infer_schema([{"boats": [{"name": "Sandpiper", "start": 5, "period": 10}]}])
DAYS = infer_schema([{"start": "2025-01-02", "end": "2025-02-03", "holidays": ["2025-01-05"]}])
MIXED = infer_schema([{"labels": ["CHAIN-2"], "position": 3, "strict": True, "note": None, "rate": 1.5}])


def accepts(schema: dict, text: str) -> bool:
    c: Cursor | None = Cursor.start(schema)
    for ch in text:
        c = c.feed(ch)
        if c is None:
            return False
    return c.done


def random_value(schema: dict, rng: random.Random):
    t = schema["type"]
    if t == "object":
        return {k: random_value(v, rng) for k, v in schema["properties"].items()}
    if t == "array":
        return [random_value(schema["items"], rng) for _ in range(rng.randint(0, 3))]
    if t == "integer":
        return rng.choice([0, 7, 42, -3, 1234567])
    if t == "number":
        return rng.choice([0.5, -2.25, 3.0, 10])
    if t == "boolean":
        return rng.choice([True, False])
    if t == "null":
        return None
    if "pattern" in schema:
        return f"20{rng.randint(10, 99)}-0{rng.randint(1, 9)}-{rng.randint(10, 28)}"
    return rng.choice(["Curlew", "CHAIN-23", "Kelpwick Quay", 'say "hi"', "é", ""])


@pytest.mark.parametrize("schema", [BOATS, DAYS, MIXED])
def test_cursor_agrees_with_jsonschema_on_fitting_replies(schema):
    rng = random.Random(1)
    assert supported(schema)
    for _ in range(60):
        obj = random_value(schema, rng)
        text = json.dumps(obj, ensure_ascii=False)
        jsonschema.validate(obj, schema)  # the reference says it fits ...
        assert accepts(schema, text), text  # ... and so does the cursor


@pytest.mark.parametrize("schema", [BOATS, DAYS, MIXED])
def test_cursor_rejects_what_jsonschema_rejects(schema):
    rng = random.Random(2)
    for _ in range(60):
        obj = random_value(schema, rng)
        # break one thing: drop a key, add a key, or change a value's type
        key = rng.choice(list(obj))
        bad = dict(obj)
        how = rng.randrange(3)
        if how == 0:
            del bad[key]
        elif how == 1:
            bad["extra"] = 1
        else:
            bad[key] = {"x": 1}
        with pytest.raises(jsonschema.ValidationError):
            jsonschema.validate(bad, schema)
        assert not accepts(schema, json.dumps(bad, ensure_ascii=False))


def test_forced_text_is_what_every_fitting_reply_continues_with():
    rng = random.Random(3)
    for schema in (BOATS, DAYS, MIXED):
        for _ in range(20):
            text = json.dumps(random_value(schema, rng), ensure_ascii=False)
            c = Cursor.start(schema)
            for i, ch in enumerate(text):
                assert text[i:].startswith(c.forced())
                c = c.feed(ch)
            assert c.done and c.forced() == ""


def test_forced_spans_of_a_reply():
    c = Cursor.start(BOATS)
    assert c.forced() == '{"boats": ['
    c = c.feed('{"boats": [{')
    assert c.forced() == '"name": "'
    c = c.feed('"name": "Curlew", "start": 2')
    assert c.forced() == ""  # another digit or the end of the number: the model's choice
    c = c.feed(",")
    assert c.forced() == ' "period": '
    d = Cursor.start(DAYS).feed('{"start": "2025')
    assert d.forced() == "-"  # the date pattern forces the dash
    assert Cursor.start(DAYS).feed('{"start": "2025-0a') is None


def test_integers_as_the_grammar_writes_them():
    s = {"type": "object", "properties": {"n": {"type": "integer"}}, "required": ["n"], "additionalProperties": False}
    assert accepts(s, '{"n": 0}') and accepts(s, '{"n": -12}')
    assert not accepts(s, '{"n": 01}') and not accepts(s, '{"n": 1.5}') and not accepts(s, '{"n": -}')


def test_unsupported_schemas():
    assert not supported({"type": "object", "properties": {"a": {"type": "string"}}, "required": [],
                          "additionalProperties": False})  # an optional key: the order of keys is a choice
    assert not supported({"anyOf": [{"type": "string"}]})
    assert pattern_steps("^(a|b)$") is None
    assert pattern_steps("^[0-9]{4}-[0-9]{2}$") is not None


def test_scan_values_agrees_with_json():
    rng = random.Random(4)
    for schema in (BOATS, DAYS, MIXED):
        for _ in range(30):
            obj = random_value(schema, rng)
            text = json.dumps(obj, ensure_ascii=False)
            values, partial = scan_values(text)
            assert partial is None

            def leaves(v):
                if isinstance(v, dict):
                    return [x for w in v.values() for x in leaves(w)]
                if isinstance(v, list):
                    return [x for w in v for x in leaves(w)]
                return [v]

            expected = [x for x in leaves(obj) if isinstance(x, str) or (isinstance(x, (int, float))
                                                                         and not isinstance(x, bool))]
            got = [json.loads(v) if not isinstance(x, str) else v for v, x in zip(values, expected)]
            assert got == expected, text


def test_draft_copies_values_in_order():
    demos = [("The Godwit leaves at minute 5 and then every 6 minutes.",
              json.dumps({"boats": [{"name": "Godwit", "start": 5, "period": 6}]}))]
    q = "The Curlew leaves at minute 2 and then every 28 minutes. The Thrift leaves at minute 4 and then every 18."
    d = Drafter(q, demos)
    c = Cursor.start(BOATS)
    assert d.draft(c, "") == '{"boats": [{"name": "'  # no guess for the first name: the model starts it
    reply = '{"boats": [{"name": "Cur'
    guess = d.draft(Cursor.start(BOATS).feed(reply), reply)
    assert guess == 'lew", "start": 2, "period": 28}, {"name": "Thrift", "start": 4, "period": 18}]}'
    assert shape("CHAIN-23").fullmatch("NET-9") and not shape("Curlew").fullmatch("NET-9")


@pytest.mark.models
def test_forced_fill_equals_the_sampled_fill_on_the_real_executor():
    """The forced path's reply is the reply of greedy sampling (free when it fits the schema, else under the
    grammar), with fewer tokens sampled one at a time."""
    from conftest import need_models
    from runner import models, settings
    from runner.execute import fill_arguments, forget_fill_misses
    from runner.llm import LocalModel
    from runner.tools import Card, Demo

    need_models()
    model = LocalModel(models.for_role(settings.load_registry(), "executor"), n_threads=1).load()
    card = Card(name="first-departure-together", description="the first minute all the boats leave together",
                schema=BOATS, demos=[
                    Demo(question="The Godwit leaves at minute 5 and then every 6 minutes. The Tern leaves at "
                                  "minute 1 and then every 4 minutes.",
                         arguments={"boats": [{"name": "Godwit", "start": 5, "period": 6},
                                              {"name": "Tern", "start": 1, "period": 4}]})])
    questions = ["Curlew: casts off at minute 2, then every 28 minutes. Thrift: casts off at minute 4, then every "
                 "18 minutes. When do both leave together?",
                 "The Whimbrel departs every 20 minutes, first at minute 17. The Marram sails at minute 12 and "
                 "again every 15 minutes after that. First minute they sail at once?"]
    for q in questions:
        forget_fill_misses()
        sampled = fill_arguments(model, card, q, seed=0, forced=False)
        forced = fill_arguments(model, card, q, seed=0, forced=True)
        assert forced.raw.strip() == sampled.raw.strip()
        assert forced.arguments == sampled.arguments is not None
        assert forced.usage.forced_tokens > forced.usage.completion_tokens / 2


# ---- strings copied from the question --------------------------------------------------------------------

CODE_CARD = infer_schema([{"code": "X", "boat": "Y", "count": 1}])
CODE_Q = "Is box GEAU6884929 for the Fulmar, 12 crates, ready? (not the Fulmar-Two)"


def pieces(text: str) -> set[str]:
    """Every whole-word piece of `text`, by brute force: spans starting and ending at word boundaries."""
    import re

    starts = [m.start() for m in re.finditer(r"\b\w|\W", text)]
    ends = [m.end() for m in re.finditer(r"\w\b|\W", text)]
    return {text[i:j] for i in starts for j in ends if j > i}


@pytest.mark.parametrize("value", ["GEAU6884929", "Fulmar", "the Fulmar", "Fulmar-Two", "12 crates", "?", "GEAU",
                                   "GAEAU6884929", "EAU6884929", "GEAU688", "Fulma", "Puffin", "ready? (n"])
def test_a_copied_string_is_a_whole_word_piece_of_the_question(value):
    schema = forced.copy_schema(CODE_CARD, {"code"}, CODE_Q)
    reply = json.dumps({"code": value, "boat": "anything", "count": 3})
    accepted = accepts(schema, reply)
    assert accepted == (value in pieces(CODE_Q))  # brute force over every span is the reference
    assert accepted == forced.copyable(value, CODE_Q)
    jsonschema.validate(json.loads(reply), CODE_CARD)  # a held string still fits the card's own schema


def test_held_places_are_those_every_demo_copies_whole():
    schema = infer_schema([{"code": "A", "boats": [{"name": "B", "note": "C"}], "asked": "D"}])
    demos = [("Code GEAU6884929: the Tern (late) and the Auk (on time). Which first?",
              {"code": "GEAU6884929", "boats": [{"name": "Tern", "note": "late"}, {"name": "Auk", "note": "on time"}],
               "asked": "first"}),
             ("Code MSCU1234565 for the Smew, held. Which first?",
              {"code": "MSCU1234565", "boats": [{"name": "Smew", "note": "held"}], "asked": "earliest"})]
    assert forced.copied_paths(schema, demos) == {"code", "boats[].name", "boats[].note"}  # "earliest" is not copied
    assert forced.copied_paths(schema, demos[:1]) == set()  # one demo is not enough to tell
    held = forced.copy_schema(schema, {"boats[].name"}, "q")
    assert held["properties"]["boats"]["items"]["properties"]["name"] == {"type": "string", forced.COPY: "q"}
    assert supported(held) and forced.copy_schema(schema, set(), "q") is schema
    # strings JSON would escape are never held
    assert not forced.copyable('say "hi"', 'we say "hi"') and not forced.copyable("a\\b", "a\\b")


@pytest.mark.models
def test_real_executor_fill_with_copied_strings_copies_codes_whole():
    """On the container family's test tasks the held fill writes every code as a whole piece of its question
    (bench/copy_fill.py compares answers right with and without the hold)."""
    from conftest import need_models
    from runner import models, settings
    from runner.execute import fill_arguments
    from runner.llm import LocalModel
    from bench.handmade import handmade_tool
    from bench.copy_fill import misspelt

    need_models()
    model = LocalModel(models.for_role(settings.load_registry(), "executor"), n_threads=1).load()
    tool = handmade_tool("container_codes")
    tasks = [json.loads(line) for line in (ROOT_DIR / "samples/container_codes/test.jsonl").read_text().splitlines()[:8]]
    for t in tasks:
        held = fill_arguments(model, tool.card, t["question"], seed=0, copy=True)
        assert held.arguments is not None and not misspelt(held.arguments, t["question"]), held.raw
