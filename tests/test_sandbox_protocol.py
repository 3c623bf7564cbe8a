"""The child-to-worker protocol: the worker trusts only the set-up frame and one well-formed result."""

from __future__ import annotations

import json
import os
import signal

from runner.sandbox import protocol

LIMITS = {"cpu_seconds": 1, "value_bytes": 100, "stdout_bytes": 20}
EXITED_0 = 0  # wait status of a normal exit with code 0
EXITED_3 = 3 << 8
KILLED_9 = signal.SIGKILL


def frames(*payloads: dict) -> bytes:
    return b"".join(protocol.frame(p) for p in payloads)


SETUP = frames(protocol.SETUP_OK)


def test_one_well_formed_result_is_accepted() -> None:
    data = SETUP + frames({"status": "ok", "value": [1, "a"], "stdout": "hi\n"})
    assert protocol.judge(data, EXITED_0, LIMITS) == {"status": "ok", "value": [1, "a"], "stdout": "hi\n"}


def test_what_follows_set_up_never_becomes_a_sandbox_error() -> None:
    for tail in [b"\xff" * 64, frames({"sandbox_error": "chosen by the tool"}), b"\x00\x00\x00\x05{bad}",
                 frames({"status": "ok", "value": 1}) + frames({"status": "ok", "value": 2}),
                 frames({"status": "ok", "value": 1, "extra": True}),
                 frames({"status": "error", "error_kind": "crashed", "message": "x"}),
                 frames({"status": "error", "error_kind": "exception", "message": "two\nlines"}),
                 frames({"status": "error", "error_kind": "exception", "message": "x" * 401}),
                 frames({"status": "error", "error_kind": "exception", "message": "x", "line": "3"}),
                 frames({"status": "ok", "value": 1, "stdout": "y" * 21})]:
        outcome = protocol.judge(SETUP + tail, EXITED_0, LIMITS)
        assert outcome == {"status": "error", "error_kind": "crashed",
                           "message": "the tool's process sent a malformed result"}, (tail, outcome)


def test_a_result_from_a_child_that_did_not_exit_cleanly_is_not_trusted() -> None:
    data = SETUP + frames({"status": "ok", "value": 1, "stdout": ""})
    assert protocol.judge(data, EXITED_3, LIMITS)["error_kind"] == "crashed"
    assert protocol.judge(data, KILLED_9, LIMITS)["error_kind"] == "crashed"


def test_no_result_is_judged_from_the_exit_status() -> None:
    assert protocol.judge(SETUP, KILLED_9, LIMITS)["message"] == "the tool's process was killed by SIGKILL (possibly out of memory)"
    assert protocol.judge(SETUP, signal.SIGXCPU, LIMITS)["error_kind"] == "timeout"
    assert "exited with code 3" in protocol.judge(SETUP, EXITED_3, LIMITS)["message"]


def test_only_a_missing_or_failed_set_up_is_the_sandboxs_error() -> None:
    assert "sandbox_error" in protocol.judge(b"", KILLED_9, LIMITS)
    assert "could not set up: EPERM" in protocol.judge(frames({"setup": "EPERM"}), EXITED_0, LIMITS)["sandbox_error"]


def test_lone_surrogates_and_oversized_values_are_bad_returns() -> None:
    body = b'{"status":"ok","value":"\\udc80","stdout":""}'
    data = SETUP + len(body).to_bytes(4, "big") + body
    assert json.loads(body)["value"] == "\udc80"
    outcome = protocol.judge(data, EXITED_0, LIMITS)
    assert outcome["error_kind"] == "bad_return" and "UTF-8" in outcome["message"]
    big = SETUP + frames({"status": "ok", "value": "z" * 200, "stdout": ""})
    assert protocol.judge(big, EXITED_0, LIMITS)["error_kind"] == "bad_return"


def test_wait_statuses_used_here_mean_what_they_say() -> None:
    # The constants above are wait(2) statuses (common practice: exit code in bits 8-15, signal in 0-6).
    assert os.WIFEXITED(EXITED_3) and os.WEXITSTATUS(EXITED_3) == 3
    assert os.WIFSIGNALED(KILLED_9) and os.WTERMSIG(KILLED_9) == signal.SIGKILL


def test_hostile_json_in_a_result_frame_is_malformed_not_an_error_in_the_worker() -> None:
    for body in [b"[" * 100_000 + b"]" * 100_000, b'{"status":"ok","value":1e999,"stdout":""}',
                 b'{"status":"ok","value":' + b"9" * 5000 + b',"stdout":""}', b'{"status":"ok","value":NaN,"stdout":""}']:
        data = SETUP + len(body).to_bytes(4, "big") + body
        outcome = protocol.judge(data, EXITED_0, LIMITS)
        assert outcome["error_kind"] in ("crashed", "bad_return"), (body[:40], outcome)
        json.dumps(outcome, allow_nan=False)  # what the worker then sends on is always valid JSON
