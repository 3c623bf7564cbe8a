"""One local GGUF model through llama.cpp: lazy loading, chat with the model's own template, JSON-Schema
constrained replies, and a usage record (tokens, wall and CPU seconds) for every call."""

from __future__ import annotations

import atexit
import json
import os
import threading
import weakref
from typing import Any, Protocol

from pydantic import BaseModel

from . import models, settings
from .errors import ContextOverflowError, ModelLoadError, ModelRuntimeError
from .meter import Stopwatch, Usage, physical_cores
from .settings import ModelSpec
from .warmstate import Outcome, PromptPrefix, WarmStates, common_prefix

Message = dict[str, str]


class Reply(BaseModel):
    """The text a model produced and what it cost."""

    text: str
    usage: Usage
    finish_reason: str = "stop"

    def json(self) -> Any:  # type: ignore[override]
        """The reply parsed as JSON (raises ValueError when it is not)."""
        return json.loads(self.text)


class ChatModel(Protocol):
    """What the builder, router and executor need from a model; the test double implements the same."""

    name: str

    def chat(self, messages: list[Message], *, seed: int, temperature: float, max_tokens: int,
             stop: list[str] | None = None, schema: dict | None = None,
             prefix: PromptPrefix | None = None) -> Reply: ...


def check_fits(model_name: str, prompt_tokens: int, max_tokens: int, n_ctx: int) -> None:
    """Raise ContextOverflowError unless a prompt of `prompt_tokens` plus a reply of up to `max_tokens` fits in
    `n_ctx` tokens (checked before anything is sent, so a long prompt fails fast and clearly)."""
    if prompt_tokens + max_tokens > n_ctx:
        raise ContextOverflowError(
            f"the prompt is {prompt_tokens:,} tokens and its reply may take {max_tokens:,}: more than the "
            f"{n_ctx:,}-token context of model '{model_name}'", tokens=prompt_tokens, limit=n_ctx)


def prompt_size(model: Any, messages: list[Message]) -> int | None:
    """Tokens `messages` take in `model`'s prompt, when the model can tell (None otherwise)."""
    count = getattr(model, "prompt_tokens", None)
    return count(messages) if callable(count) else None


_LOADED: "weakref.WeakSet[LocalModel]" = weakref.WeakSet()


@atexit.register
def _close_loaded() -> None:
    for model in list(_LOADED):
        model.close()


class LocalModel:
    """A GGUF model loaded on first use; one llama.cpp context reused so shared prompt prefixes stay cached."""

    def __init__(self, spec: ModelSpec, *, n_ctx: int = 4096, n_threads: int | None = None,
                 verbose: bool = False):
        self.spec = spec
        self.name = spec.name
        self.n_ctx = n_ctx
        self.n_threads = n_threads or int(os.environ.get("JIGWRIGHT_THREADS", "0")) or physical_cores()
        self.verbose = verbose
        self.load_usage: Usage | None = None
        self._llm: Any = None
        self._grammars: dict[str, Any] = {}
        self._formatter: Any = None
        self._vocab: Any = None
        self._warm: WarmStates | None = None
        self._lock = threading.Lock()

    @property
    def loaded(self) -> bool:
        return self._llm is not None

    def load(self) -> "LocalModel":
        """Check the file (size, cached SHA-256 stamp) and load it once. The header is not read again here: the
        SHA-256 pins the exact file, whose header `models add` or the registry's entry vouched for (reading
        the header's whole vocabulary in Python is a cost every fresh process would pay)."""
        if self._llm is not None:
            return self
        path = models.check_file(self.spec, rehash=False)
        from llama_cpp import Llama  # heavy import, only when a model is really needed

        with Stopwatch() as sw:
            try:
                self._llm = Llama(model_path=str(path), n_ctx=self.n_ctx, n_threads=self.n_threads,
                                  n_threads_batch=self.n_threads, verbose=self.verbose, seed=0)
            except (ValueError, RuntimeError) as exc:
                raise ModelLoadError(f"llama.cpp could not load model '{self.name}' from {path}: {exc}") from exc
        self.load_usage = Usage(wall_seconds=sw.wall_seconds, cpu_seconds=sw.cpu_seconds)
        self._warm = WarmStates(self._llm, self.spec.sha256)
        _LOADED.add(self)
        return self

    def close(self) -> None:
        """Free the llama.cpp model and context now (also done for every loaded model at interpreter exit,
        while the library's own functions still exist: freeing from the garbage collector after that point
        prints ignored errors)."""
        llm, self._llm = self._llm, None
        self._warm = None
        self._formatter = None
        self._grammars.clear()
        if llm is not None:
            llm.close()

    def keep_prefix(self, messages: list[Message], prefix: PromptPrefix) -> Outcome:
        """Ahead of time: make sure a saved state exists for the stable prefix of `messages` (everything before
        the last message's content), evaluating and saving it if not. Nothing is generated."""
        self.load()
        assert self._warm is not None
        with self._lock:
            return self._warm.prepare(messages, prefix, load=False)

    def _grammar(self, schema: dict) -> Any:
        key = json.dumps(schema)  # key order matters: the grammar emits properties in the schema's order
        if key not in self._grammars:
            from llama_cpp import LlamaGrammar

            self._grammars[key] = LlamaGrammar.from_json_schema(key, verbose=self.verbose)
        return self._grammars[key]

    def tokenize(self, text: str) -> list[int]:
        self.load()
        return self._llm.tokenize(text.encode("utf-8"), add_bos=False, special=True)

    def _chat_formatter(self) -> Any:
        """The model's own chat template (from the GGUF metadata), as llama-cpp-python applies it."""
        if self._formatter is None:
            from llama_cpp.llama_chat_format import Jinja2ChatFormatter

            llm = self._llm
            template = llm.metadata.get("tokenizer.chat_template")
            if not template:
                return None
            eos, bos = llm.token_eos(), llm.token_bos()
            self._formatter = Jinja2ChatFormatter(
                template=template, eos_token=llm._model.token_get_text(eos) if eos != -1 else "",
                bos_token=llm._model.token_get_text(bos) if bos != -1 else "")
        return self._formatter

    def prompt_tokens(self, messages: list[Message]) -> int:
        """How many tokens `messages` take once the chat template is applied (what llama.cpp will evaluate)."""
        self.load()
        try:
            formatter = self._chat_formatter()
        except Exception:  # an unusual template: count the texts and a few tokens per turn instead
            formatter = None
        if formatter is not None:
            text = formatter(messages=messages).prompt
            return len(self._llm.tokenize(text.encode("utf-8"), add_bos=True, special=True))
        return sum(len(self.tokenize(m["content"])) + 5 for m in messages) + 3

    def chat(self, messages: list[Message], *, seed: int, temperature: float, max_tokens: int,
             stop: list[str] | None = None, schema: dict | None = None, top_p: float = 0.95,
             top_k: int = 40, prefix: PromptPrefix | None = None) -> Reply:
        """One chat completion with the model's own template; `schema` constrains the reply to JSON that fits it.
        The prompt is measured first: one that leaves no room for `max_tokens` raises ContextOverflowError.
        With `prefix`, the messages before the last are a stable prefix: its saved state is loaded if there
        is one (those tokens count as cached), else it is evaluated and saved for later processes."""
        self.load()
        check_fits(self.name, self.prompt_tokens(messages), max_tokens, self.n_ctx)
        with self._lock:
            llm = self._llm
            before = list(llm._input_ids[: llm.n_tokens])
            grammar = self._grammar(schema) if schema is not None else None
            with Stopwatch() as sw:
                warm = self._warm.prepare(messages, prefix) if prefix is not None and self._warm else Outcome()
                if warm.how == "restored":
                    before = list(llm._input_ids[: llm.n_tokens])
                try:
                    out = llm.create_chat_completion(
                        messages=messages, seed=seed, temperature=temperature, top_p=top_p, top_k=top_k,
                        max_tokens=max_tokens, stop=stop or [], grammar=grammar)
                except (ValueError, RuntimeError) as exc:
                    raise ModelRuntimeError(f"model '{self.name}' failed: {exc}") from exc
            u = out["usage"]
            after = list(llm._input_ids[: u["prompt_tokens"]])
            cached = min(common_prefix(before, after), max(u["prompt_tokens"] - 1, 0))
        choice = out["choices"][0]
        return Reply(
            text=choice["message"]["content"] or "",
            finish_reason=choice.get("finish_reason") or "stop",
            usage=Usage(prompt_tokens=u["prompt_tokens"], completion_tokens=u["completion_tokens"],
                        cached_tokens=cached, restored_tokens=min(warm.restored, cached),
                        wall_seconds=sw.wall_seconds, cpu_seconds=sw.cpu_seconds),
        )


    def _chat_tokens(self, messages: list[Message]) -> list[int] | None:
        """The prompt tokens `create_chat_completion` evaluates for `messages` (the model's own chat template from
        its GGUF header, rendered and tokenised the same way), or None for a model without one."""
        llm = self._llm
        if llm.chat_handler is not None or llm.chat_format != "chat_template.default":
            return None
        if self._formatter is None:
            from llama_cpp.llama_chat_format import Jinja2ChatFormatter

            def text(tok: int) -> str:
                return llm._model.token_get_text(tok) if tok != -1 else ""

            self._formatter = Jinja2ChatFormatter(template=llm.metadata["tokenizer.chat_template"],
                                                  eos_token=text(llm.token_eos()), bos_token=text(llm.token_bos()),
                                                  stop_token_ids=[llm.token_eos()])
        result = self._formatter(messages=messages)
        return llm.tokenize(result.prompt.encode("utf-8"), add_bos=not result.added_special, special=True)

    def chat_forced(self, messages: list[Message], *, schema: dict, max_tokens: int,
                    draft: bool = True, prefix: PromptPrefix | None = None) -> Reply | None:
        """The greedy reply that fits `schema`, with the spans the schema forces appended in batches
        (`guided.decode`): the free greedy reply when that fits, else the grammar's. None when this model or
        schema is not one the forced path handles (the caller then uses `chat`). `prefix` as for `chat`."""
        from . import forced, guided
        from .guess import Drafter

        if not forced.supported(schema):
            return None
        self.load()
        with self._lock:
            prompt = self._chat_tokens(messages)
            if prompt is None:
                return None
            if self._vocab is None:
                self._vocab = guided.Vocab(self._llm)
            llm = self._llm
            before = list(llm._input_ids[: llm.n_tokens])
            with Stopwatch() as sw:
                warm = self._warm.prepare(messages, prefix) if prefix is not None and self._warm else Outcome()
                if warm.how == "restored":
                    before = list(llm._input_ids[: llm.n_tokens])
                try:
                    drafter = Drafter.for_chat(messages) if draft else None
                    out = guided.decode(llm, prompt, schema, max_tokens, self._vocab, drafter=drafter)
                except (ValueError, RuntimeError) as exc:
                    raise ModelRuntimeError(f"model '{self.name}' failed: {exc}") from exc
            # a prefix evaluated just now (to save its state) was not reused: only what was there or was loaded
            cached = min(out.cached, common_prefix(before, prompt))
        return Reply(text=out.text, finish_reason=out.finish_reason,
                     usage=Usage(prompt_tokens=len(prompt), completion_tokens=len(out.tokens),
                                 forced_tokens=out.forced, cached_tokens=cached,
                                 restored_tokens=min(warm.restored, cached), wall_seconds=sw.wall_seconds,
                                 cpu_seconds=sw.cpu_seconds))


_OPEN: dict[str, LocalModel] = {}


def open_model(role: str, name: str | None = None, *, verbose: bool = False) -> LocalModel:
    """The model for a role (default from models.toml), shared within this process."""
    registry = settings.load_registry()
    spec = models.for_role(registry, role, name)
    if spec.name not in _OPEN:
        _OPEN[spec.name] = LocalModel(spec, verbose=verbose)
    return _OPEN[spec.name]


__all__ = ["ChatModel", "LocalModel", "PromptPrefix", "Reply", "check_fits", "open_model", "prompt_size"]
