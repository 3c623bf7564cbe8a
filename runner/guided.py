"""Greedy decoding of a JSON reply on a llama.cpp context with forced spans appended in one batch.

The loop alternates between two steps. Where the schema leaves exactly one continuation (`forced.Cursor`), its
tokens are evaluated together in one llama.cpp batch, which costs a fraction of sampling them one by one. Where
the schema leaves a choice, the model picks the token with the highest logit among those that keep the reply a
fitting prefix: the same token llama.cpp's greedy sampler picks, and the same one it picks under the schema's
grammar when the best token does not fit. So the reply is the one a free greedy reply gives when that fits the
schema, and the grammar's reply otherwise, from a single pass.

A forced span is tokenised the way the model writes it: the tokenizer may merge the span's last characters
with the first characters of what follows (`": ` then `-5` is `":`, ` -`, `5`), so only the tokens that every
possible continuation shares are appended; the rest is left for the model to write."""

from __future__ import annotations

import codecs
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .guess import Drafter
from .forced import Cursor, continuations


@dataclass
class Decoded:
    """The reply's text and tokens, how many of them were appended as forced spans, and how many prompt tokens
    were reused from the context's cache."""

    text: str
    tokens: list[int]
    forced: int
    batches: int
    cached: int
    finish_reason: str
    overruled: int = 0  # appended tokens the model's own choice replaced


@dataclass
class Vocab:
    """Token pieces and tokenisations of forced spans, cached per model."""

    llm: Any
    pieces: dict[int, bytes] = field(default_factory=dict)
    spans: dict[tuple[str, tuple[str, ...]], list[int]] = field(default_factory=dict)

    def piece(self, token: int) -> bytes:
        p = self.pieces.get(token)
        if p is None:
            import ctypes

            import llama_cpp

            buf = ctypes.create_string_buffer(256)
            n = llama_cpp.llama_token_to_piece(self.llm._model.vocab, token, buf, len(buf), 0, False)
            p = bytes(buf.raw[: max(n, 0)])  # control tokens (end of turn and the like) have no text: b""
            self.pieces[token] = p
        return p

    def tokenize(self, text: str) -> list[int]:
        return self.llm.tokenize(text.encode("utf-8"), add_bos=False, special=False)

    def span_tokens(self, span: str, after: Cursor) -> list[int]:
        """The tokens of `span` that do not depend on what follows it (all of them at the end of the reply)."""
        probes = tuple(continuations(after))
        key = (span, probes)
        hit = self.spans.get(key)
        if hit is not None:
            return hit
        whole = self.tokenize(span)
        common = whole
        for p in probes:
            toks = self.tokenize(span + p)
            n = 0
            while n < len(common) and n < len(toks) and common[n] == toks[n]:
                n += 1
            common = common[:n]
        limit, out, used = len(span.encode("utf-8")), [], 0
        for t in common:  # only tokens lying wholly inside the span
            used += len(self.piece(t))
            if used > limit:
                break
            out.append(t)
        self.spans[key] = out
        return out


def _advance(cursor: Cursor, pending: bytes, piece: bytes) -> tuple[Cursor, bytes] | None:
    """The cursor after a token's bytes (an incomplete UTF-8 character waits in `pending`), or None."""
    if not piece:
        return None  # end-of-generation and other control tokens: the reply is not finished
    data = pending + piece
    try:
        text = codecs.getincrementaldecoder("utf-8")().decode(data, final=False)
    except UnicodeDecodeError:
        return None
    rest = data[len(text.encode("utf-8")):]
    nxt = cursor.feed(text)
    if nxt is None or (rest and not nxt.in_string()):
        return None
    return nxt, rest


def _feed_tokens(cursor: Cursor, pending: bytes, tokens: list[int], vocab: "Vocab") -> tuple[Cursor, bytes] | None:
    for t in tokens:
        step = _advance(cursor, pending, vocab.piece(t))
        if step is None:
            return None
        cursor, pending = step
    return cursor, pending


def _cache_prefix(llm: Any, prompt: list[int]) -> int:
    """Keep the longest prefix of the context that the prompt shares (at least one prompt token is evaluated
    again, so there are logits to sample from); returns how many tokens are kept."""
    cached = llm._input_ids[: llm.n_tokens]
    n = 0
    limit = min(len(cached), len(prompt) - 1)
    while n < limit and cached[n] == prompt[n]:
        n += 1
    if n > 0 and not llm._ctx.kv_cache_seq_rm(-1, n, -1):
        n = 0
    if n == 0:
        llm.reset()
    llm.n_tokens = n
    return n


def _pick(logits: np.ndarray, cursor: Cursor, pending: bytes, vocab: Vocab) -> tuple[int, Cursor, bytes] | None:
    """The token with the highest logit that keeps the reply fitting (ties: the lower id, as llama.cpp's greedy
    sampler), with the cursor after it; None when no token fits."""
    best = int(np.argmax(logits))
    step = _advance(cursor, pending, vocab.piece(best))
    if step is not None:
        return best, *step
    for t in np.argsort(-logits, kind="stable"):
        step = _advance(cursor, pending, vocab.piece(int(t)))
        if step is not None:
            return int(t), *step
    return None


def _eval_batch(llm: Any, tokens: list[int], outputs: list[int]) -> None:
    """Evaluate `tokens` after the context in one llama.cpp batch, with logits at the batch positions in
    `outputs` and at the last one (Llama.eval keeps only the last)."""
    n_past = llm.n_tokens
    llm._ctx.kv_cache_seq_rm(-1, n_past, -1)
    batch = llm._batch
    batch.set_batch(batch=tokens, n_past=n_past, logits_all=False)
    for i in outputs:
        batch.batch.logits[i] = True
    llm._ctx.decode(batch)
    llm.input_ids[n_past: n_past + len(tokens)] = tokens
    llm.n_tokens += len(tokens)
    llm._requires_eval = False


def _truncate(llm: Any, n: int) -> None:
    llm._ctx.kv_cache_seq_rm(-1, n, -1)
    llm.n_tokens = n


@dataclass
class _Step:
    tokens: list[int]
    accepted: int
    batches: int
    overruled: int
    cursor: Cursor
    pending: bytes
    deferred: list[int]
    nothing_fits: bool = False


def _sure_positions(vocab: Vocab, cursor: Cursor, pending: bytes, draft: list[int]) -> set[int]:
    """Positions of the draft whose token every fitting continuation of the tokens before it must have (the
    stable tokens of a forced span), so they need no check, assuming the draft holds up to there."""
    sure: set[int] = set()
    c, pend, j = cursor, pending, 0
    while j < len(draft):
        span = c.forced()
        stable = vocab.span_tokens(span, c.feed(span)) if span else []
        if stable and draft[j: j + len(stable)] == stable:
            sure.update(range(j, j + len(stable)))
            n = len(stable)
        else:
            n = 1
        step = _feed_tokens(c, pend, draft[j: j + n], vocab)
        if step is None:
            break
        c, pend = step
        j += n
    return sure


def _verify_draft(llm: Any, vocab: Vocab, cursor: Cursor, pending: bytes, deferred: list[int], draft: list[int],
                  logits: Any, check_all: bool) -> _Step:
    """Evaluate the deferred tokens and a draft in one batch and keep the draft's tokens up to the first that
    is not the model's own best fitting choice, which replaces it. Tokens of forced spans that every
    continuation shares are kept unchecked (no logits are computed for them)."""
    sure = set() if check_all else _sure_positions(vocab, cursor, pending, draft)
    c, pend = cursor, pending
    out: list[int] = []
    if not deferred and 0 not in sure:  # the first drafted token is checked against the logits at hand
        choice = _pick(logits(-1), cursor, pending, vocab)
        if choice is None:
            return _Step([], 0, 0, 0, cursor, pending, [], nothing_fits=True)
        tok, c1, p1 = choice
        if tok != draft[0]:
            return _Step([tok], 0, 0, 1, c1, p1, [tok])
        sure.add(0)
    whole = _feed_tokens(cursor, pending, draft, vocab)
    ends = whole is not None and whole[0].done
    if ends and len(sure) == len(draft):
        return _Step(list(draft), len(draft), 0, 0, whole[0], whole[1], [])
    d = len(deferred)
    batch = deferred + (draft[:-1] if ends else draft)
    start = llm.n_tokens
    _eval_batch(llm, batch, [d + j - 1 for j in range(len(draft)) if j not in sure])
    for j, t in enumerate(draft):
        if j in sure:
            step = _advance(c, pend, vocab.piece(t))
            assert step is not None
            c, pend = step
            out.append(t)
            continue
        choice = _pick(logits(d + j - 1), c, pend, vocab)
        if choice is None:
            return _Step(out, len(out), 1, 0, c, pend, [], nothing_fits=True)
        tok, c, pend = choice
        out.append(tok)
        if tok != t:  # the model writes this place otherwise: keep its token, drop the rest
            _truncate(llm, start + d + j)
            return _Step(out, len(out) - 1, 1, 1, c, pend, [tok])
    return _Step(out, len(out), 1, 0, c, pend, [])


def decode(llm: Any, prompt: list[int], schema: dict[str, Any], max_tokens: int,
           vocab: Vocab | None = None, check_all: bool = False, drafter: Drafter | None = None) -> Decoded:
    """Greedy reply to `prompt` (token ids of the chat so far) that fits `schema`, at most `max_tokens` tokens.

    A forced span's tokens that every continuation shares are appended unchecked; its last tokens, which may
    merge with what follows, go in the same batch but each is kept only if it is the model's own best fitting
    token at its place (read from the batch's logits), else the model's choice replaces it. A token the model
    picks is evaluated only when its logits are needed: in the next span's batch when a span follows it.
    `check_all` checks every appended token (to measure how often the model would have written a span
    otherwise)."""
    vocab = vocab or Vocab(llm)
    cursor = Cursor.start(schema)
    cached = _cache_prefix(llm, prompt)
    llm.eval(prompt[cached:])
    n_vocab = llm.n_vocab()

    def logits(i: int) -> np.ndarray:
        return np.ctypeslib.as_array(llm._ctx.get_logits_ith(i), shape=(n_vocab,))

    tokens: list[int] = []
    deferred: list[int] = []  # picked by the model, not evaluated yet
    forced = batches = overruled = 0
    pending = b""
    finish = "stop"
    while not cursor.done:
        room = max_tokens - len(tokens)
        if room <= 0:
            finish = "length"
            break
        if drafter is not None:
            reply = b"".join(vocab.piece(t) for t in tokens).decode("utf-8", errors="ignore")
            guess = drafter.draft(cursor, reply)
            if guess:
                step = _verify_draft(llm, vocab, cursor, pending, deferred, vocab.tokenize(guess)[:room], logits,
                                     check_all)
                tokens.extend(step.tokens)
                forced += step.accepted
                batches += step.batches
                overruled += step.overruled
                cursor, pending, deferred = step.cursor, step.pending, step.deferred
                if step.nothing_fits:
                    finish = "nothing fits"
                    break
                continue
        span = cursor.forced()
        sure: list[int] = []
        unsure: list[int] = []
        if span:
            after = cursor.feed(span)
            assert after is not None
            sure = vocab.span_tokens(span, after)
            alone = vocab.span_tokens(span, Cursor(()))  # the span tokenised on its own
            if not after.done and alone[: len(sure)] == sure:
                unsure = alone[len(sure):]
            if check_all:
                sure, unsure = [], sure + unsure
            sure, unsure = sure[:room], unsure[: max(room - len(sure), 0)]
        if not deferred and not sure and unsure:  # the first token is checked against the logits at hand
            choice = _pick(logits(-1), cursor, pending, vocab)
            if choice is None:
                finish = "nothing fits"
                break
            if choice[0] == unsure[0]:
                sure, unsure = unsure[:1], unsure[1:]
            else:
                overruled += 1
                tok, cursor, pending = choice
                tokens.append(tok)
                deferred = [tok]
                continue
        if sure or (deferred and unsure):
            batch = sure + unsure
            whole = _feed_tokens(cursor, pending, batch, vocab)
            if whole is not None and whole[0].done and not unsure:  # the reply ends here: nothing to evaluate
                tokens.extend(batch)
                forced += len(batch)
                cursor, pending = whole
                break
            d = len(deferred)
            start = llm.n_tokens
            _eval_batch(llm, deferred + batch, [d + len(sure) - 1 + j for j in range(len(unsure))])
            deferred = []
            batches += 1
            step = _feed_tokens(cursor, pending, sure, vocab)
            assert step is not None
            cursor, pending = step
            tokens.extend(sure)
            forced += len(sure)
            for j, t in enumerate(unsure):
                choice = _pick(logits(d + len(sure) - 1 + j), cursor, pending, vocab)
                if choice is None:
                    finish = "nothing fits"
                    break
                tok, cursor, pending = choice
                tokens.append(tok)
                if tok == t:
                    forced += 1
                    continue
                overruled += 1  # the model writes this place otherwise: keep its token, drop the rest
                _truncate(llm, start + d + len(sure) + j)
                deferred = [tok]
                break
            if finish != "stop":
                break
            continue
        if deferred:
            llm.eval(deferred)
            deferred = []
        choice = _pick(logits(-1), cursor, pending, vocab)
        if choice is None:
            finish = "nothing fits"
            break
        tok, cursor, pending = choice
        tokens.append(tok)
        deferred = [tok]
    text = b"".join(vocab.piece(t) for t in tokens).decode("utf-8", errors="replace")
    return Decoded(text=text, tokens=tokens, forced=forced, batches=batches, cached=cached, finish_reason=finish,
                   overruled=overruled)


__all__ = ["Decoded", "Vocab", "decode"]
