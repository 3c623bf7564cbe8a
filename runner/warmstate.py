"""Warm starts across processes: the llama.cpp state after a stable prompt prefix (the router prompt up to the
question, a tool's fill prompt up to the question), kept on disk under JIGWRIGHT_HOME so that a new process
meeting the same prefix loads it instead of evaluating every usage card again.

What is kept is only what the prefix needs: the KV cells of llama.cpp's sequence 0 (`llama_state_seq_get_data`),
no logits of any position, plus the prefix's token ids. A state is found by a key made of the model's SHA-256,
the llama.cpp binding's version, the context size, the hashes of the prompt templates the prefix came from and
the prefix itself (its text and its tokens); the file repeats the key and a SHA-256 of the KV bytes, and a file
that is damaged, cut short or made for another key is treated as absent (and removed), so the prefix is simply
evaluated again. The folder is capped in bytes; the least recently used states go first."""

from __future__ import annotations

import hashlib
import os
import struct
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Sequence

from pydantic import BaseModel, ValidationError

from . import prompts, settings
from .atomicfile import replace_with

FORMAT = 1
MAGIC = b"JWWARM\x00\x01"  # this file format's own mark; the version is its last byte
DEFAULT_CAP_MB = 512  # the router state of the demo tools is ~20 MB, each tool's fill state ~5 MB
SUFFIX = ".state"
_QUESTION_MARK = "\u0000jigwright-question\u0000"  # stands for the question when the prefix is cut from a prompt


@dataclass(frozen=True)
class PromptPrefix:
    """A chat call whose messages before the last are the same for every question: `label` names it in the
    state file (router, fill:TOOL) and `templates` are the prompt templates those messages were rendered from."""

    label: str
    templates: tuple[str, ...]


class StateKey(BaseModel):
    """Everything a saved state depends on; two prefixes share a state only if all of it is equal."""

    format: int = FORMAT
    model_sha256: str
    binding: str
    n_ctx: int
    templates: dict[str, str]
    prefix_sha256: str
    tokens_sha256: str
    n_tokens: int

    def digest(self) -> str:
        return hashlib.sha256(self.model_dump_json().encode()).hexdigest()


class StateHeader(BaseModel):
    """The head of a state file: its key, what it is for, the prefix tokens and a checksum of the KV bytes."""

    key: StateKey
    label: str
    tokens: list[int]
    kv_bytes: int
    kv_sha256: str
    saved: float


def cap_bytes() -> int:
    """The folder's size limit: JIGWRIGHT_WARM_CAP_MB (0 turns warm starts off), else DEFAULT_CAP_MB."""
    raw = os.environ.get("JIGWRIGHT_WARM_CAP_MB", "").strip()
    try:
        mb = float(raw) if raw else DEFAULT_CAP_MB
    except ValueError:
        mb = DEFAULT_CAP_MB
    return max(0, int(mb * 1_000_000))


def tokens_digest(tokens: Sequence[int]) -> str:
    return hashlib.sha256(struct.pack(f"<{len(tokens)}i", *tokens)).hexdigest()


class Shelf:
    """The folder of state files: atomic writes, checked reads, least-recently-used eviction under a byte cap."""

    def __init__(self, root: Path | None = None, cap: int | None = None):
        self.root = root or settings.warm_dir()
        self.cap = cap_bytes() if cap is None else cap

    @property
    def enabled(self) -> bool:
        return self.cap > 0

    def path(self, key: StateKey) -> Path:
        return self.root / (key.digest()[:40] + SUFFIX)

    def _read_header(self, fh: Any) -> StateHeader:
        if fh.read(len(MAGIC)) != MAGIC:
            raise ValueError("not a state file of this format")
        (size,) = struct.unpack("<I", fh.read(4))
        if size > 64 * 1024 * 1024:
            raise ValueError("header too large")
        return StateHeader.model_validate_json(fh.read(size))

    def has(self, key: StateKey) -> bool:
        """True when a state file for `key` is there and its head names that key (the KV bytes are checked on
        load)."""
        p = self.path(key)
        try:
            with open(p, "rb") as fh:
                return self._read_header(fh).key == key
        except (OSError, ValueError, ValidationError, struct.error):
            return False

    def get(self, key: StateKey) -> tuple[list[int], bytes] | None:
        """The prefix tokens and KV bytes saved for `key`, or None when there are none or the file is damaged,
        cut short or made for another key (such a file is removed). A hit counts as a use for eviction."""
        p = self.path(key)
        try:
            with open(p, "rb") as fh:
                head = self._read_header(fh)
                kv = fh.read(head.kv_bytes + 1)
        except FileNotFoundError:
            return None
        except (OSError, ValueError, ValidationError, struct.error):
            self.discard(p)
            return None
        if (head.key != key or len(kv) != head.kv_bytes or hashlib.sha256(kv).hexdigest() != head.kv_sha256
                or len(head.tokens) != key.n_tokens or tokens_digest(head.tokens) != key.tokens_sha256):
            self.discard(p)
            return None
        try:
            os.utime(p)
        except OSError:
            pass
        return head.tokens, kv

    def put(self, key: StateKey, label: str, tokens: list[int], kv: bytes) -> Path | None:
        """Write the state atomically (a temporary file renamed into place), then evict down to the cap.
        Returns the file, or None when it could not be written or alone exceeds the cap."""
        head = StateHeader(key=key, label=label, tokens=list(tokens), kv_bytes=len(kv),
                           kv_sha256=hashlib.sha256(kv).hexdigest(), saved=time.time())
        raw = head.model_dump_json().encode()
        if len(MAGIC) + 4 + len(raw) + len(kv) > self.cap:
            return None
        p = self.path(key)
        try:
            self.root.mkdir(parents=True, exist_ok=True)
            def write(tmp: Path) -> None:  # two writes: the KV bytes can be large, so they are not copied
                with open(tmp, "wb") as fh:
                    fh.write(MAGIC + struct.pack("<I", len(raw)) + raw)
                    fh.write(kv)

            replace_with(p, write, prefix=".partial-", suffix=SUFFIX)
        except OSError:
            return None
        self.evict(keep=p)
        return p

    def files(self) -> Iterator[Path]:
        if self.root.is_dir():
            yield from (p for p in self.root.iterdir() if p.suffix == SUFFIX and not p.name.startswith("."))

    def heads(self) -> dict[Path, StateHeader]:
        """Each readable state file's head (damaged files are left out)."""
        out: dict[Path, StateHeader] = {}
        for p in self.files():
            try:
                with open(p, "rb") as fh:
                    out[p] = self._read_header(fh)
            except (OSError, ValueError, ValidationError, struct.error):
                continue
        return out

    def evict(self, keep: Path | None = None) -> list[Path]:
        """Remove least recently used states until the folder fits the cap; also partial files an interrupted
        write left behind more than an hour ago."""
        removed: list[Path] = []
        if self.root.is_dir():
            for p in self.root.glob(".partial-*"):
                try:
                    if time.time() - p.stat().st_mtime > 3600:
                        self.discard(p)
                except OSError:
                    pass
        entries = []
        for p in self.files():
            try:
                st = p.stat()
            except OSError:
                continue
            entries.append((st.st_mtime, p, st.st_size))
        total = sum(size for _, _, size in entries)
        for _, p, size in sorted(entries, key=lambda e: e[0]):
            if total <= self.cap:
                break
            if p == keep:
                continue
            self.discard(p)
            removed.append(p)
            total -= size
        return removed

    def total_bytes(self) -> int:
        return sum(p.stat().st_size for p in self.files())

    @staticmethod
    def discard(p: Path) -> None:
        try:
            p.unlink()
        except OSError:
            pass


# ---- the llama.cpp side ----------------------------------------------------------------------------------------

def common_prefix(a: Sequence[int], b: Sequence[int]) -> int:
    """How many leading tokens two token lists share."""
    n = 0
    for x, y in zip(a, b):
        if x != y:
            break
        n += 1
    return n


def capture(llm: Any) -> bytes:
    """The KV cells of sequence 0 (all the context holds; no logits)."""
    import ctypes

    import llama_cpp

    ctx = llm._ctx.ctx
    size = llama_cpp.llama_state_seq_get_size(ctx, 0)
    buf = (ctypes.c_uint8 * size)()
    got = llama_cpp.llama_state_seq_get_data(ctx, buf, size, 0)
    if got == 0 or got > size:
        raise RuntimeError("llama.cpp could not copy the sequence state")
    return ctypes.string_at(buf, got)


def forget_context(llm: Any) -> None:
    """Empty the context: no KV cells, no tokens."""
    llm._ctx.kv_cache_seq_rm(-1, 0, -1)
    llm.n_tokens = 0
    llm._requires_eval = True


def restore(llm: Any, tokens: list[int], kv: bytes) -> bool:
    """Put a saved prefix into an emptied context; False (and an empty context) if llama.cpp refuses it."""
    import ctypes

    import llama_cpp

    forget_context(llm)
    src = (ctypes.c_uint8 * len(kv)).from_buffer_copy(kv)
    if llama_cpp.llama_state_seq_set_data(llm._ctx.ctx, src, len(kv), 0) != len(kv):
        forget_context(llm)
        return False
    llm.input_ids[: len(tokens)] = tokens
    llm.n_tokens = len(tokens)
    llm._requires_eval = True  # no logits were restored: llama-cpp-python must decode before sampling
    return True


def evaluate_prefix(llm: Any, tokens: list[int]) -> None:
    """Make the context hold exactly `tokens`, reusing what it already shares with them."""
    keep = common_prefix(llm.input_ids[: llm.n_tokens].tolist(), tokens)
    keep = min(keep, len(tokens) - 1)  # always decode at least one token, so the context ends in a live state
    if keep > 0 and llm._ctx.kv_cache_seq_rm(-1, keep, -1):
        llm.n_tokens = keep
    else:
        forget_context(llm)
    llm.eval(tokens[llm.n_tokens:])


@dataclass
class Outcome:
    """What preparing a prefix did: its size in tokens; whether it was already in the context, loaded from a
    saved state (`restored`), evaluated and saved, or already saved (ahead-of-time preparation)."""

    tokens: int = 0
    how: str = "none"  # none | in-context | restored | saved | ready | evaluated
    state_bytes: int = 0
    file: Path | None = None

    @property
    def restored(self) -> int:
        return self.tokens if self.how == "restored" else 0


class WarmStates:
    """The warm states of one loaded llama.cpp model (a `llama_cpp.Llama`)."""

    def __init__(self, llm: Any, model_sha256: str, shelf: Shelf | None = None):
        self.llm = llm
        self.model_sha256 = model_sha256
        self.shelf = shelf or Shelf()
        self._formatter: Any = None

    def _format(self, messages: list[dict[str, str]]) -> str | None:
        """The prompt text llama-cpp-python makes of `messages` with the model's own chat template (None when
        the model has none: then there are no warm states)."""
        if self._formatter is None:
            from llama_cpp.llama_chat_format import Jinja2ChatFormatter

            llm = self.llm
            template = llm.metadata.get("tokenizer.chat_template")
            if not template or llm.chat_format != "chat_template.default" or llm.chat_handler is not None:
                return None
            eos, bos = llm.token_eos(), llm.token_bos()
            self._formatter = Jinja2ChatFormatter(
                template=template, eos_token=llm._model.token_get_text(eos) if eos != -1 else "",
                bos_token=llm._model.token_get_text(bos) if bos != -1 else "")
        return self._formatter(messages=messages).prompt

    def prefix_tokens(self, messages: list[dict[str, str]]) -> tuple[str, list[int]] | None:
        """The prompt's text and tokens up to where the last message's content begins, as llama.cpp will see
        them (the tokens the whole prompt shares with the prefix text, so a boundary merge cannot mislead)."""
        if not messages or messages[-1].get("role") != "user":
            return None
        try:
            marked = self._format(messages[:-1] + [{**messages[-1], "content": _QUESTION_MARK}])
            full = self._format(messages)
        except Exception:  # an unusual template: no warm state, the call goes on as before
            return None
        if marked is None or full is None or _QUESTION_MARK not in marked:
            return None
        text = marked[: marked.index(_QUESTION_MARK)]
        if not full.startswith(text):
            return None
        tok = lambda s: self.llm.tokenize(s.encode("utf-8"), add_bos=False, special=True)  # noqa: E731
        head, whole = tok(text), tok(full)
        n = min(common_prefix(head, whole), len(whole) - 1)
        return (text, whole[:n]) if n > 0 else None

    def key(self, text: str, tokens: list[int], prefix: PromptPrefix) -> StateKey:
        import llama_cpp

        return StateKey(model_sha256=self.model_sha256, binding=str(llama_cpp.__version__), n_ctx=self.llm.n_ctx(),
                        templates=prompts.template_hash(*prefix.templates),
                        prefix_sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
                        tokens_sha256=tokens_digest(tokens), n_tokens=len(tokens))

    def prepare(self, messages: list[dict[str, str]], prefix: PromptPrefix, *, load: bool = True) -> Outcome:
        """Before a chat call: make the context start with the prompt's stable prefix. In order: it is there
        already; a saved state is loaded (`load`); or it is evaluated and saved for later processes. With
        `load=False` (preparing ahead of time) a saved state is only checked for, not loaded. Warm states
        never fail a call: if llama.cpp or the disk fails here, the context is emptied and the call goes on
        cold."""
        if not self.shelf.enabled:
            return Outcome()
        try:
            return self._prepare(messages, prefix, load)
        except (OSError, ValueError, RuntimeError):
            forget_context(self.llm)
            return Outcome()

    def _prepare(self, messages: list[dict[str, str]], prefix: PromptPrefix, load: bool) -> Outcome:
        split = self.prefix_tokens(messages)
        if split is None:
            return Outcome()
        text, tokens = split
        llm = self.llm
        in_context = common_prefix(llm.input_ids[: llm.n_tokens].tolist(), tokens) == len(tokens)
        if load and in_context:
            return Outcome(len(tokens), "in-context")
        key = self.key(text, tokens, prefix)
        if not load and self.shelf.has(key):
            p = self.shelf.path(key)
            return Outcome(len(tokens), "ready", p.stat().st_size, p)
        if load:
            found = self.shelf.get(key)
            if found is not None:
                saved_tokens, kv = found
                if saved_tokens == tokens and restore(llm, tokens, kv):
                    return Outcome(len(tokens), "restored", len(kv), self.shelf.path(key))
                self.shelf.discard(self.shelf.path(key))  # llama.cpp refused it: make it again below
        if in_context:  # keep the prefix, drop what followed it, and save that
            llm._ctx.kv_cache_seq_rm(-1, len(tokens), -1)
            llm.n_tokens = len(tokens)
            llm._requires_eval = True
        else:
            evaluate_prefix(llm, tokens)
        try:
            kv = capture(llm)
        except RuntimeError:
            return Outcome(len(tokens), "evaluated")
        path = self.shelf.put(key, prefix.label, tokens, kv)
        return Outcome(len(tokens), "saved" if path else "evaluated", len(kv), path)


__all__ = ["DEFAULT_CAP_MB", "common_prefix", "Outcome", "PromptPrefix", "Shelf", "StateKey", "WarmStates", "cap_bytes"]
