"""Warm states: saved llama.cpp states of stable prompt prefixes, used by later processes.

The folder's own rules (checked reads, atomic writes, least-recently-used eviction) are tested on plain bytes;
everything about what a state does is tested with the real executor model in real processes: a state saved by
one `jigwright ask` is used by the next one with the same reply, a damaged state is ignored and made again, and
a state made for another model or another prompt template is never used."""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import time
from pathlib import Path

import pytest

from conftest import need_models
from runner import prompts, settings
from runner.warmstate import SUFFIX, Shelf, StateKey, tokens_digest
from test_runloop import JW, real_tools


def key(n: int, model: str = "a" * 64, templates: dict | None = None) -> StateKey:
    toks = list(range(n))
    return StateKey(model_sha256=model, binding="0.0", n_ctx=4096, templates=templates or {"router.j2": "x"},
                    prefix_sha256="p" * 64, tokens_sha256=tokens_digest(toks), n_tokens=n)


# ---- the folder ------------------------------------------------------------------------------------------------

def test_state_round_trip_and_checked_reads(tmp_path):
    shelf = Shelf(tmp_path, cap=10**9)
    k = key(5)
    kv = os.urandom(4096)
    path = shelf.put(k, "router", list(range(5)), kv)
    assert path is not None and path.exists()
    assert shelf.get(k) == (list(range(5)), kv)
    assert shelf.has(k) and not shelf.has(key(6))
    assert shelf.get(key(5, model="b" * 64)) is None  # another model: another file, none there
    assert shelf.get(key(5, templates={"router.j2": "y"})) is None  # another template hash: likewise


def test_damaged_cut_short_or_misplaced_state_is_absent_and_removed(tmp_path):
    shelf = Shelf(tmp_path, cap=10**9)
    k = key(3)
    kv = bytes(range(256)) * 64
    for damage in ("flip", "cut", "garbage", "misplaced"):
        path = shelf.put(k, "router", [0, 1, 2], kv)
        assert path is not None
        data = bytearray(path.read_bytes())
        if damage == "flip":
            data[-100] ^= 0xFF  # one KV byte: only the checksum notices
        elif damage == "cut":
            data = data[: len(data) - 10]
        elif damage == "garbage":
            data = bytearray(b"not a state at all")
        path.write_bytes(bytes(data))
        if damage == "misplaced":  # a valid file for key k, found under another key's name
            other = key(3, model="c" * 64)
            path.rename(shelf.path(other))
            assert shelf.get(other) is None and not shelf.path(other).exists()
            continue
        assert shelf.get(k) is None, damage
        assert not path.exists(), damage


def test_least_recently_used_states_go_first_under_the_cap(tmp_path):
    kv = b"\0" * 100_000
    shelf = Shelf(tmp_path, cap=10**9)
    keys = [key(n) for n in (1, 2, 3)]
    for i, k in enumerate(keys):
        shelf.put(k, f"fill:t{i}", list(range(k.n_tokens)), kv)
        os.utime(shelf.path(k), (time.time() - 100 + i, time.time() - 100 + i))
    assert shelf.get(keys[0]) is not None  # a use makes the oldest the most recent
    size = shelf.path(keys[0]).stat().st_size
    shelf.cap = int(size * 3.5)
    shelf.put(key(4), "fill:t3", list(range(4)), kv)
    left = {p.name for p in shelf.files()}
    assert shelf.path(keys[1]).name not in left  # least recently used
    assert {shelf.path(keys[0]).name, shelf.path(keys[2]).name, shelf.path(key(4)).name} <= left
    assert shelf.total_bytes() <= shelf.cap
    assert Shelf(tmp_path, cap=10).put(key(9), "router", list(range(9)), kv) is None  # larger than the cap


def test_cap_zero_turns_warm_states_off(monkeypatch, tmp_path):
    monkeypatch.setenv("JIGWRIGHT_WARM_CAP_MB", "0")
    assert not Shelf(tmp_path).enabled


# ---- real model, real processes --------------------------------------------------------------------------------

QUESTION = ("Logbook, slipway desk: the Godwit casts off at minute 3 and again every 4 minutes; the Teal at "
            "minute 1 and every 6 minutes after. At which minute do both cast off together first?")


def ask(question: str) -> dict:
    proc = subprocess.run([JW, "ask", question, "--json", "--fallback", "none"], capture_output=True, text=True,
                          timeout=600)
    assert proc.returncode == 0, proc.stderr[-2000:]
    return json.loads(proc.stdout)


def state_files() -> list[Path]:
    d = settings.warm_dir()
    return sorted(p for p in d.iterdir() if p.suffix == SUFFIX) if d.exists() else []


@pytest.mark.models
def test_state_saved_by_one_process_is_used_by_the_next(tmp_home):
    need_models()
    from runner.store import ToolStore

    with ToolStore() as store:
        for t in real_tools():
            store.put(t)
    cold = ask(QUESTION)
    assert cold["route"] == "departures" and cold["status"] == "tool"
    assert cold["answer"] == 7  # minutes 3, 7, 11 and 1, 7, 13: worked by hand
    assert cold["tokens"]["restored"] == 0
    assert len(state_files()) == 2  # the router prompt and the departures fill prompt

    warm = ask(QUESTION)
    for field in ("answer", "route", "arguments", "confidence"):
        assert warm[field] == cold[field], field
    # the router's and the fill's prompts up to the question came from the saved states
    assert warm["tokens"]["restored"] > 0.8 * warm["tokens"]["prompt"]
    assert warm["tokens"]["cached"] >= warm["tokens"]["restored"]
    assert warm["tokens"]["prompt"] == cold["tokens"]["prompt"]

    # damage every saved state (one byte of the KV data): ignored, the prompt is evaluated, same reply
    for p in state_files():
        data = bytearray(p.read_bytes())
        data[-1000] ^= 0x55
        p.write_bytes(bytes(data))
    damaged = ask(QUESTION)
    assert damaged["tokens"]["restored"] == 0
    for field in ("answer", "route", "arguments"):
        assert damaged[field] == cold[field], field
    # and the states were made again, whole
    again = ask(QUESTION)
    assert again["tokens"]["restored"] > 0 and again["answer"] == cold["answer"]


@pytest.mark.models
def test_state_of_another_template_or_model_is_not_used(tmp_home, tmp_path, monkeypatch):
    need_models()
    from runner import models
    from runner.llm import LocalModel
    from runner.route import ROUTER_PREFIX, demos_per_tool, route, router_messages, stable_cards
    from runner.warmstate import forget_context

    cards = [t.card for t in real_tools()]
    reg = settings.load_registry()
    executor = LocalModel(models.for_role(reg, "executor"), n_threads=1)
    first = route(executor, cards, QUESTION)
    assert first.usage.restored_tokens == 0 and len(state_files()) == 1
    forget_context(executor._llm)  # as a new process would start
    second = route(executor, cards, QUESTION)
    assert second.usage.restored_tokens > 0 and second.tool == first.tool

    # the same prompt text from a router template that changed (a comment only): the state is not used
    changed = tmp_path / "prompts"
    shutil.copytree(prompts.PROMPTS_DIR, changed)
    (changed / "router.j2").write_text("{# edited #}\n" + (changed / "router.j2").read_text())
    with monkeypatch.context() as patch:
        patch.setattr(prompts, "PROMPTS_DIR", changed)
        forget_context(executor._llm)
        third = route(executor, cards, QUESTION)
    assert third.usage.restored_tokens == 0 and third.tool == first.tool
    assert len(state_files()) == 2  # one more state, for the changed template

    # another model with the same messages: the executor's state copied to where the builder's would be is
    # refused (its head names the executor), and the builder makes its own
    builder = LocalModel(models.for_role(reg, "builder"), n_threads=1).load()
    messages = router_messages(stable_cards(cards), QUESTION, demos_per_tool(cards))
    text, tokens = builder._warm.prefix_tokens(messages)
    target = builder._warm.shelf.path(builder._warm.key(text, tokens, ROUTER_PREFIX))
    shutil.copy(state_files()[0], target)
    fourth = route(builder, cards, QUESTION)
    assert fourth.usage.restored_tokens == 0
    assert builder.spec.sha256.encode() in target.read_bytes()[:4096]  # remade for the builder
    assert executor.spec.sha256.encode() not in target.read_bytes()[:4096]


@pytest.mark.models
def test_states_made_ahead_are_refreshed_when_tools_change_and_make_the_first_ask_warm(tmp_home):
    need_models()
    from runner import models, warmup
    from runner.llm import LocalModel
    from runner.store import ToolStore

    departures, working = real_tools()
    executor = LocalModel(models.for_role(settings.load_registry(), "executor"), n_threads=1)
    one = warmup.prepare(executor, [departures.card])
    assert [(s.label, s.how) for s in one.states] == [("router", "saved"), ("fill:departures", "saved")]
    assert all(s.state_bytes > 0 for s in one.states)
    assert [s.how for s in warmup.prepare(executor, [departures.card]).states] == ["ready", "ready"]

    # a tool added: the router prompt changes, so its state is made again and the old one removed
    two = warmup.prepare(executor, [departures.card, working.card])
    assert {s.label: s.how for s in two.states} == {"router": "saved", "fill:departures": "ready",
                                                    "fill:working-days": "saved"}
    assert two.removed == 1 and len(state_files()) == 3
    # a tool retired: its fill state and the two-tool router state go
    back = warmup.prepare(executor, [departures.card])
    assert {s.label: s.how for s in back.states} == {"router": "saved", "fill:departures": "ready"}
    assert back.removed == 2 and len(state_files()) == 2

    with ToolStore() as store:
        store.put(departures)
    first = ask(QUESTION)  # the first question of a new process, after the states were made ahead
    assert first["route"] == "departures" and first["answer"] == 7
    assert first["tokens"]["restored"] > 0.8 * first["tokens"]["prompt"]
    assert len(state_files()) == 2  # nothing new was saved: both prefixes were found


@pytest.mark.models
def test_saved_kv_bytes_do_not_depend_on_threads_or_batching(tmp_home):
    """Why a warm reply equals a cold one: the KV cells of a prefix are the same bytes however it was
    evaluated (one or two llama.cpp threads, one batch or two), so a loaded state is exactly what evaluating
    the prefix in this process would have made. The build's executor (threads per core) and `answer`'s (one
    thread) can share states."""
    need_models()
    import hashlib

    from runner import models
    from runner.llm import LocalModel
    from runner.route import demos_per_tool, router_messages, stable_cards
    from runner.warmstate import capture, evaluate_prefix, forget_context

    cards = stable_cards([t.card for t in real_tools()])
    messages = router_messages(cards, QUESTION, demos_per_tool(cards))
    spec = models.for_role(settings.load_registry(), "executor")
    digests = set()
    for threads, split in ((1, None), (2, None), (1, 100)):
        m = LocalModel(spec, n_threads=threads).load()
        _, tokens = m._warm.prefix_tokens(messages)
        forget_context(m._llm)
        if split:
            m._llm.eval(tokens[:split])
        evaluate_prefix(m._llm, tokens)
        digests.add(hashlib.sha256(capture(m._llm)).hexdigest())
    assert len(digests) == 1
