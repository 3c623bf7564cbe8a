"""The real default models through llama.cpp: schema-constrained replies, metering, and the GGUF header reader
checked against the format's reference reader."""

from __future__ import annotations

import resource

import jsonschema
import pytest

from conftest import need_models, real_model_path
from runner import models, settings
from runner.llm import LocalModel

pytestmark = pytest.mark.models


@pytest.fixture(scope="module")
def executor() -> LocalModel:
    need_models()
    return LocalModel(models.for_role(settings.load_registry(), "executor")).load()


SCHEMA = {
    "type": "object",
    "properties": {
        "boat": {"type": "string"},
        "crew": {"type": "integer"},
        "cargo": {"type": "array", "items": {"type": "string"}, "minItems": 1},
        "inspected": {"type": "boolean"},
    },
    "required": ["boat", "crew", "cargo", "inspected"],
    "additionalProperties": False,
}


def test_executor_reply_validates_against_its_schema(executor):
    # Reference: the jsonschema library, the reference implementation of the JSON Schema standard.
    reply = executor.chat(
        [{"role": "user", "content": "The Kittiwake came in with 4 crew carrying nets and rope; it was inspected. "
                                     "Describe it as JSON."}],
        seed=3, temperature=0.0, max_tokens=80, schema=SCHEMA)
    data = reply.json()
    jsonschema.validate(data, SCHEMA)
    assert reply.usage.completion_tokens > 0 and reply.usage.prompt_tokens > 10


def test_usage_cpu_seconds_agree_with_getrusage(executor):
    # Reference: the operating system's own accounting, resource.getrusage(RUSAGE_SELF), taken around the call.
    before = resource.getrusage(resource.RUSAGE_SELF)
    reply = executor.chat([{"role": "user", "content": "Count from one to twenty in words."}],
                          seed=1, temperature=0.0, max_tokens=60)
    after = resource.getrusage(resource.RUSAGE_SELF)
    outside = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    assert reply.usage.cpu_seconds > 0.05
    assert reply.usage.cpu_seconds <= outside + 0.01
    assert reply.usage.cpu_seconds >= 0.9 * outside - 0.05


def test_same_seed_same_reply_and_prefix_is_reused(executor):
    msgs = [{"role": "user", "content": "Name three sea birds, comma separated."}]
    a = executor.chat(msgs, seed=7, temperature=0.8, max_tokens=20)
    b = executor.chat(msgs, seed=7, temperature=0.8, max_tokens=20)
    assert a.text == b.text
    assert b.usage.cached_tokens >= b.usage.prompt_tokens - 1


@pytest.mark.parametrize("role", ["executor", "builder"])
def test_header_reader_agrees_with_gguf_package(role):
    # Reference: the `gguf` package, the GGUF format's reference reader (published with llama.cpp).
    gguf = pytest.importorskip("gguf")
    need_models()
    path = real_model_path(role)
    ours = models.read_gguf(path)
    reader = gguf.GGUFReader(str(path))

    def field(key):
        f = reader.fields[key]
        return f.contents() if hasattr(f, "contents") else f.parts[f.data[0]].tolist()[0]

    keys = ours["keys"]
    arch = field("general.architecture")
    assert keys["general.architecture"] == arch
    assert keys["general.size_label"] == field("general.size_label")
    assert keys["general.file_type"] == field("general.file_type")
    assert ours["quantization"] == gguf.LlamaFileType(keys["general.file_type"]).name.replace("MOSTLY_", "")
    assert keys[f"{arch}.context_length"] == field(f"{arch}.context_length")
    assert keys["tokenizer.chat_template"] == field("tokenizer.chat_template")
    assert ours["tensor_count"] == len(reader.tensors)
    assert ours["metadata_key_count"] == len([k for k in reader.fields if not k.startswith("GGUF.")])


def test_the_fallback_of_the_real_executor_answers_a_closed_question_with_yes_or_no(executor):
    # The real fallback path (execute.answer_directly): whatever the small model writes around it, a closed
    # question's answer comes out as "yes" or "no", and the full reply is kept beside it. (Whether it is the
    # right one is the model's business; bench/direct_answer_rules.py measures that on the demo queue.)
    from runner.execute import answer_directly

    out = answer_directly(executor, "Is container code REBU1080612 valid under ISO 6346?", seed=0)
    assert out.answer in ("yes", "no"), out.text
    assert len(out.text) > len(out.answer)
