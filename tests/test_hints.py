"""`hints` in family.toml: read as given, shown verbatim to the builder in the shape and draft prompts, and part
of the build's cache key (only when given, so builds without hints keep their keys)."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from doubles import ScriptedModel
from runner import build as B
from runner.errors import InputError
from runner.sandbox import Limits, Sandbox
from runner.store import ToolStore

# invented toy family: net floats needed, one float every so many metres of headrope plus one at each end
NETS = [("A 30 metre headrope with a float every 5 metres: how many floats?", 7, {"length": 30, "spacing": 5}),
        ("Floats for 24 metres of headrope at one per 4 metres?", 7, {"length": 24, "spacing": 4}),
        ("Headrope 18 m, floats 3 m apart. Count them.", 7, {"length": 18, "spacing": 3}),
        ("How many floats go on a 40 metre headrope spaced 8 metres apart?", 6, {"length": 40, "spacing": 8})]
HINT = "Count a float at both ends of the headrope as well as every gap between."


def family_dir(tmp_path: Path, hints_toml: str | None) -> Path:
    folder = tmp_path / "net-floats"
    folder.mkdir(parents=True, exist_ok=True)
    toml = 'name = "net-floats"\ndescription = "floats on one headrope"\n'
    (folder / "family.toml").write_text(toml + (hints_toml or ""))
    (folder / "examples.jsonl").write_text("".join(json.dumps({"question": q, "answer": a}) + "\n"
                                                   for q, a, _ in NETS))
    return folder / "examples.jsonl"


@pytest.mark.parametrize("toml,want", [
    (None, []),
    (f"hints = [{json.dumps(HINT)}]\n", [HINT]),
    (f'hints = """\n{HINT}\nThe ends are part of the length.\n"""\n', [HINT, "The ends are part of the length."]),
    ('hints = ["  ", "one line "]\n', ["one line"]),
])
def test_hints_are_read_as_lines(tmp_path, toml, want):
    assert B.load_family(family_dir(tmp_path, toml)).hints == want


def test_hints_of_another_type_are_refused(tmp_path):
    with pytest.raises(InputError, match=r"family.toml: 'hints' must be a line of text or a list of lines"):
        B.load_family(family_dir(tmp_path, "hints = 3\n"))


def test_hints_change_the_key_only_when_given(tmp_path):
    settings = B.BuildSettings()
    plain = B.load_family(family_dir(tmp_path / "a", None))
    empty = B.load_family(family_dir(tmp_path / "b", "hints = []\n"))
    hinted = B.load_family(family_dir(tmp_path / "c", f"hints = [{json.dumps(HINT)}]\n"))
    keys = [B.build_key(f, "b", "e", settings) for f in (plain, empty, hinted)]
    assert keys[0] == keys[1] != keys[2]


def test_hints_reach_the_shape_and_draft_prompts_verbatim(tmp_path):
    family = B.load_family(family_dir(tmp_path / "a", f"hints = [{json.dumps(HINT)}]\n"))

    def builder(messages, **kw):
        if messages[0]["content"].startswith("You design the arguments"):  # the questions asked, in order
            asked = sorted((messages[-1]["content"].find(q), a) for q, _, a in NETS if q in messages[-1]["content"])
            return json.dumps({"arguments": [a for _, a in asked]})
        return "```python\ndef solve(length, spacing):\n    return length // spacing + 1\n```"

    def executor(messages, **kw):
        return json.dumps(next(a for q, _, a in NETS if q == messages[-1]["content"]))

    model = ScriptedModel("builder", builder)
    with Sandbox(pool_size=1, limits=Limits(cpu_seconds=1, wall_seconds=3)) as sandbox, \
            ToolStore(tmp_path / "store") as store:
        tool, report = B.build(family, builder=model, executor=ScriptedModel("executor", executor), sandbox=sandbox,
                               store=store, settings=B.BuildSettings(draft_samples=1, shape_samples=1,
                                                                     strategies=["direct"]))
    assert report.verified
    shape_prompt, draft_prompt = model.calls[0].last_user, model.calls[1].last_user
    assert f"- {HINT}" in shape_prompt and f"- {HINT}" in draft_prompt
    plain = B.Builder(family.model_copy(update={"hints": []}), builder=model, executor=model, sandbox=None,
                      settings=B.BuildSettings())
    assert "says:" not in plain.shape_messages()[-1]["content"]
