"""Pure checks on proposed tool arguments, and the inferred JSON Schema checked with the jsonschema library."""

from __future__ import annotations

import keyword

import jsonschema
import pytest

from runner import shapecheck as S

Q = "The Kittiwake leaves at minute 3 and then every 7 minutes; the Puffin every 5 minutes from minute 2. When together?"
GOOD = {"boats": [{"name": "Kittiwake", "start": 3, "every": 7}, {"name": "Puffin", "start": 2, "every": 5}]}


def test_numbers_in_reads_times_dates_and_plain_numbers():
    assert S.numbers_in("from 08:30 to 2026-03-02, 7 boats") == {8.0, 30.0, 2026.0, 3.0, 2.0, 7.0}


def test_key_tokens_skip_sentence_openers_and_keep_names_and_codes():
    toks = S.key_tokens("Which boat holds crate CSQU3054383? The Kittiwake or the Puffin. Is 'net loft' open?")
    assert {"CSQU3054383", "Kittiwake", "Puffin", "net loft"} <= toks
    assert "Which" not in toks and "The" not in toks and "Is" not in toks


def test_good_arguments_pass():
    assert S.shape_problems([Q], [17], [GOOD]) == []


def test_missing_number_name_and_leaked_answer_are_caught():
    dropped = {"boats": [{"name": "Kittiwake", "start": 3, "every": 7}]}
    probs = S.shape_problems([Q], [17], [dropped])
    assert any("numbers 2, 5 are missing" in p for p in probs)
    assert any("Puffin missing" in p for p in probs)
    leaked = dict(GOOD, answer=17)
    assert any("answer appears" in p for p in S.shape_problems([Q], [17], [leaked]))
    # a number the question itself states is no leak
    assert S.shape_problems([Q], [7], [GOOD]) == []


def test_objects_must_share_one_shape():
    other = {"vessels": GOOD["boats"]}
    assert any("share one shape" in p for p in S.shape_problems([Q, Q], [17, 17], [GOOD, other]))
    assert S.shape_problems([Q], [17], [GOOD, GOOD])[0].startswith("expected 1 argument objects")


def test_inferred_schema_accepts_its_examples_and_rejects_others():
    # Reference: the jsonschema library (reference implementation of the JSON Schema standard).
    objs = [GOOD, {"boats": [{"name": "Gull", "start": 0, "every": 4}], "note": None} | {}]
    objs[1].pop("note")
    schema = S.infer_schema(objs)
    jsonschema.Draft202012Validator.check_schema(schema)
    for o in objs:
        jsonschema.validate(o, schema)
    for bad in ({"boats": [{"name": "Gull", "start": "0", "every": 4}]},
                {"boats": [{"name": "Gull", "start": 0}]},
                {"boats": [], "extra": 1}):
        with pytest.raises(jsonschema.ValidationError):
            jsonschema.validate(bad, schema)
    assert schema["properties"]["boats"]["items"]["properties"]["every"] == {"type": "integer"}


def test_list_items_of_several_kinds_make_optional_keys_and_patterns():
    objs = [{"day": "2026-03-02", "at": "08:30", "clues": [{"kind": "east", "boat": "A", "other": "B"},
                                                          {"kind": "at", "boat": "A", "berth": 1}]},
            {"day": "2026-04-01", "at": "17:05", "clues": [{"kind": "west", "boat": "C", "other": "D"}]}]
    schema = S.infer_schema(objs)
    item = schema["properties"]["clues"]["items"]
    assert item["required"] == ["kind", "boat"] and set(item["properties"]) == {"kind", "boat", "other", "berth"}
    for o in objs:
        jsonschema.validate(o, schema)
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(dict(objs[0], day="2 March"), schema)
    with pytest.raises(jsonschema.ValidationError):
        jsonschema.validate(dict(objs[0], at="8.30am"), schema)


def test_invented_and_duplicated_numbers_are_caught():
    invented = {"boats": GOOD["boats"], "from_minute": 0}
    assert any("numbers 0 are not in the question" in p for p in S.shape_problems([Q], [17], [invented]))
    doubled = {"boats": GOOD["boats"], "asked_minute": 3}
    assert any("copied more often" in p for p in S.shape_problems([Q], [17], [doubled]))
    assert S.shape_problems(["Berths 1 to 3: the Gull is at berth 1."], ["Gull"],
                            [{"berths": 3, "first": 1, "clue": {"boat": "Gull", "berth": 1}}]) == []


def test_prune_drops_an_extra_field_that_copies_or_invents_a_number():
    extra = dict(GOOD, first_departure=3)
    assert S.prune_extras([Q], [17], [extra]) == [GOOD]
    invented = dict(GOOD, first_minute=31)
    assert S.prune_extras([Q], [17], [invented]) == [GOOD]
    assert S.prune_extras([Q], [17], [GOOD]) == [GOOD]
    only = {"boats": GOOD["boats"][:1]}
    assert S.prune_extras([Q], [17], [only]) == [only]  # nothing to gain by dropping the only field


def test_a_yes_no_answer_copied_into_the_arguments_is_a_leak():
    q = "Does PPKJ5282263 pass the ISO 6346 check digit test?"
    assert any("answer appears" in p for p in S.shape_problems([q], ["yes"], [{"code": "PPKJ5282263", "ok": "yes"}]))
    assert not any("answer appears" in p for p in S.shape_problems([q], ["yes"], [{"code": "PPKJ5282263"}]))


def test_a_name_stated_in_several_facts_must_be_copied_for_each():
    # invented toy question: the start holdings alone drop the swaps the answer depends on
    q = "Nell has the rope crate and Piran the tar crate. Later Nell and Piran exchange crates. Who has the tar crate?"
    holdings = {"crew": [{"name": "Nell", "crate": "rope"}, {"name": "Piran", "crate": "tar"}]}
    probs = S.shape_problems([q], ["Nell"], [holdings])
    assert probs == ["question 1: Nell, Piran stated more often than copied"]
    assert not S.is_hard(probs[0])  # soft: ranks the proposal lower, does not rule it out
    full = dict(holdings, swaps=[{"a": "Nell", "b": "Piran"}], asked="tar")
    assert S.shape_problems([q], ["Nell"], [full]) == []


@pytest.mark.parametrize("index", [0, 1, 2])
def test_the_builders_worked_demonstrations_pass_the_checks(index):
    """The argument designs shown to the builder as worked demonstrations must themselves be clean."""
    import json
    import re

    from runner import prompts, readwords
    user = prompts.render("shape_demo.j2", part="user", index=index)
    objects = json.loads(prompts.render("shape_demo.j2", part="assistant", index=index))["arguments"]
    questions = re.findall(r"Question \d+: (.*)", user)
    assert len(questions) == len(objects) == 3
    # as the build checks a proposal: values written in words are converted first (runner/readwords.py)
    raw, objects, _ = readwords.convert_objects(objects)
    questions = readwords.convert_questions(questions, raw, objects)
    assert S.shape_problems(questions, [None] * 3, objects) == []
    S.infer_schema(objects)


def test_argument_objects_written_in_pieces_are_joined_when_unambiguous():
    a = [{"crew": ["Nell", "Piran"]}, {"swaps": [["Nell", "Piran"]]}, {"asked": "tar"}]
    b = [{"crew": ["Jory"]}, {"swaps": []}, {"asked": "salt"}]
    joined = [{"crew": ["Nell", "Piran"], "swaps": [["Nell", "Piran"]], "asked": "tar"},
              {"crew": ["Jory"], "swaps": [], "asked": "salt"}]
    assert S.merge_pieces(2, [a, b]) == joined          # nested: a list of pieces per question
    assert S.merge_pieces(2, a + b) == joined           # flat: the same run of keys once per question
    assert S.merge_pieces(2, joined) == joined          # already whole: unchanged
    uneven = a + [{"crew": ["Jory"]}, {"asked": "salt"}, {"swaps": []}]
    assert S.merge_pieces(2, uneven) == uneven          # keys in another order: ambiguous, left alone
    clash = [[{"crew": ["Nell"]}, {"crew": ["Piran"]}], b]
    assert S.merge_pieces(2, clash) == clash            # a key given twice: not pieces of one object


def test_answer_paths_say_where_a_text_answer_is_found_in_every_example():
    # invented toy data
    objs = [{"crew": [{"name": "Nell", "crate": "tar"}, {"name": "Jory", "crate": "rope"}],
             "swaps": [{"from": "Nell", "to": "Jory"}, {"from": "Jory", "to": "Nell"}], "asked_crate": "tar"},
            {"crew": [{"name": "Piran", "crate": "salt"}, {"name": "Cadan", "crate": "net"}],
             "swaps": [{"from": "Cadan", "to": "Piran"}, {"from": "Cadan", "to": "Piran"}], "asked_crate": "net"}]
    # the crew list names each member once; the swaps may name one twice: the list comes first
    assert S.answer_paths(objs, ["Jory", "Piran"]) == ["crew[].name", "swaps[].to"]
    assert S.answer_paths(objs, ["Jory", "somebody"]) == []
    assert S.answer_paths(objs, [3, 4]) == []  # numbers coincide too easily to say anything


def test_a_name_copied_more_often_than_stated_is_pruned():
    # the slip seen on the departures family: an "asked" field naming one boat when the question asks about all
    extra = dict(GOOD, asked_boat="Kittiwake")
    probs = S.shape_problems([Q], [17], [extra])
    assert probs == ["question 1: Kittiwake copied more often than stated"] and not S.is_hard(probs[0])
    assert S.prune_extras([Q], [17], [extra]) == [GOOD]


def test_a_design_that_leaves_out_most_numbers_is_ruled_out():
    qs = ["Tally: Auk 21 crab; Tern 32 crab; Smew 26 ling. Crab total?", "Auk 3 ling, Tern 4 ling. Ling total?"]
    summary = [{"species": "crab"}, {"species": "ling"}]
    problems = S.shape_problems(qs, [53, 7], summary)
    assert any("most numbers" in p for p in problems) and any(S.is_hard(p) for p in problems)
    copied = [{"entries": [{"boat": "Auk", "boxes": 21, "species": "crab"}, {"boat": "Tern", "boxes": 32, "species": "crab"},
                           {"boat": "Smew", "boxes": 26, "species": "ling"}], "species": "crab"},
              {"entries": [{"boat": "Auk", "boxes": 3, "species": "ling"}, {"boat": "Tern", "boxes": 4, "species": "ling"}],
               "species": "ling"}]
    assert not any("most numbers" in p for p in S.shape_problems(qs, [53, 7], copied))


def test_top_level_keys_become_parameter_names_alike_in_every_object():
    # Python's own rules (the `keyword` module and str.isidentifier) decide what a parameter name may be
    objects = [{"card": "527?961", "?": "?", "from": "Quay"}, {"card": "10?1", "?": "?", "from": "Slip"}]
    fixed = S.parameter_keys(objects)
    assert [list(o) for o in fixed] == [["card", "value", "from_value"]] * 2
    assert fixed[1] == {"card": "10?1", "value": "?", "from_value": "Slip"}
    kept = [{"x": 1, "_x": 2, " scratched": 3, "2nd": 4}]
    assert S.parameter_keys(kept) == [{"x": 1, "x_2": 2, "scratched": 3, "n_2nd": 4}]
    plain = [{"a": 1}, {"a": 2}]
    assert S.parameter_keys(plain) is plain
    for name in ("value", "from_value", "x_2", "scratched", "n_2nd"):
        assert name.isidentifier() and not keyword.iskeyword(name)
