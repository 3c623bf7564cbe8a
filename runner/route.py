"""The router: the executor model picks the tool for a question from the usage cards, or "none", under a
JSON Schema enum grammar so it can only name a tool that exists. A confidence comes from the model's own
token probabilities when the backend is a local llama.cpp model."""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any

from pydantic import BaseModel

from . import prompts
from .errors import ContextOverflowError
from .llm import ChatModel, LocalModel, Message, prompt_size
from .warmstate import PromptPrefix
from .meter import Stopwatch, Usage
from .shortlist import shortlist
from .tools import Card

ROUTER_TEMPLATE = "router.j2"
ROUTER_NONE_TEMPLATE = "router_none.j2"
NONE = "none"
# The most tools the router is shown when their cards do not all fit the context (with two sample tools among
# 200 generated cards the largest shortlisted prompt was 1,114 of 4,096 tokens: bench/route_budget.py), and the
# share of the best BM25+ score a card needs to be shown. With every card within 8 shown, the 0.5B router
# sent a departures question to none when 7 unrelated cards sharing one word ("sail") stood beside it
# (scores 116 against 4.3); cards under a tenth of the best are that kind of chance match.
SHORTLIST_SIZE = 8
SHORTLIST_FLOOR = 0.1
# Everything before the question is the same for every question: its llama.cpp state is kept on disk.
ROUTER_PREFIX = PromptPrefix("router", (ROUTER_TEMPLATE, ROUTER_NONE_TEMPLATE))


class Route(BaseModel):
    """Where a question goes: `tool` is a tool name or "none"; `chosen` is the model's own pick (they differ
    only when the confidence fell below the threshold)."""

    tool: str
    chosen: str
    confidence: float | None = None
    usage: Usage = Usage()
    raw: str = ""
    note: str | None = None
    shortlist: list[str] | None = None  # the tools the router was shown when not all cards fit
    prompt_tokens: int | None = None  # the routing prompt's size, measured before it was sent


def router_names(cards: list[Card]) -> list[str]:
    """The names the router may answer: the tools (in card order) and "none"."""
    return [c.name for c in cards if c.name != NONE] + [NONE]


def router_schema(cards: list[Card]) -> dict[str, Any]:
    return {"type": "string", "enum": router_names(cards)}


def demos_per_tool(cards: list[Card], budget_chars: int = 7000) -> int:
    """Two demo questions per tool while the prompt stays small (~2.5k tokens), else one: the 0.5B router
    needs the demos (`bench/router_demos.py`, demo queue, a card per demo family: descriptions alone routed 6
    of 24 right, one demo each 17, two demos each 21). 7000 characters of cards come to about 2.7k tokens of
    the 4k context."""
    for k in (2, 1):
        size = sum(len(c.description) + sum(len(d.question) for d in c.demos[:k]) for c in cards)
        if size <= budget_chars:
            return k
    return 1


def router_messages(cards: list[Card], question: str, demos_per_tool: int = 2) -> list[Message]:
    """Few-shot chat: the card list, then each card's first demo questions as earlier turns answered with
    the tool's name (round-robin over the tools, so none is favoured by being last), one question answered
    "none", and the question last. Everything before the question is the same for every question, so
    llama.cpp keeps it cached across a queue."""
    msgs: list[Message] = [{"role": "system", "content": prompts.render(ROUTER_TEMPLATE, cards=cards)}]
    for i in range(demos_per_tool):
        for card in cards:
            if i < len(card.demos):
                msgs.append({"role": "user", "content": card.demos[i].question})
                msgs.append({"role": "assistant", "content": json.dumps(card.name)})
    msgs.append({"role": "user", "content": prompts.render(ROUTER_NONE_TEMPLATE)})
    msgs.append({"role": "assistant", "content": json.dumps(NONE)})
    msgs.append({"role": "user", "content": question})
    return msgs


def stable_cards(cards: list[Card]) -> list[Card]:
    """Cards in name order, so the prompt prefix does not depend on the order the store lists them in."""
    return sorted(cards, key=lambda c: c.name)


def reply_budget(cards: list[Card]) -> int:
    """Tokens the router's reply may take: the longest name, quoted, with a little room."""
    return max(len(n) for n in router_names(cards)) + 8


@dataclass
class Fitted:
    """The router prompt for one question: the cards shown, the messages and their measured size."""

    cards: list[Card]
    messages: list[Message]
    tokens: int | None
    shortlisted: bool


_ALL_CARDS_SIZE: dict[tuple[int, str], int] = {}


def _all_cards_size(model: ChatModel, cards: list[Card], demos: int) -> int:
    """Tokens of the router prompt with every card and an empty question, remembered per model and card set
    (tokenizing 200 cards for every question cost more than routing it)."""
    import hashlib

    ident = hashlib.sha256(json.dumps([[c.name, c.description, [d.question for d in c.demos]] for c in cards])
                           .encode("utf-8", "surrogatepass")).hexdigest() + f":{demos}"
    key = (id(model), ident)
    if key not in _ALL_CARDS_SIZE:
        _ALL_CARDS_SIZE[key] = prompt_size(model, router_messages(cards, "", demos)) or 0
    return _ALL_CARDS_SIZE[key]


def fit_prompt(model: ChatModel, cards: list[Card], question: str) -> Fitted:
    """The router prompt with every card if it fits the model's context (with room for the reply); else the
    BM25+ shortlist of the cards closest to the question (up to SHORTLIST_SIZE, none under SHORTLIST_FLOOR of
    the best score), as many of them and with as many demos each as fit. An empty shortlist means no card shares a word with the question. Raises
    ContextOverflowError when not even one card fits beside the question. A model that cannot measure its
    prompts gets every card, as before."""
    n_ctx = getattr(model, "n_ctx", None)
    cards = stable_cards(cards)
    demos = demos_per_tool(cards)
    messages = router_messages(cards, question, demos)
    if n_ctx is None or prompt_size(model, [{"role": "user", "content": question}]) is None:
        return Fitted(cards, messages, None, False)
    # every card: the remembered size of the cards' part plus the question's (a few tokens of slack for
    # how the two join); measured exactly when it is close
    estimate = _all_cards_size(model, cards, demos) + (prompt_size(model, [{"role": "user", "content": question}])
                                                       or 0)
    if estimate > n_ctx + 64:
        size = estimate
    else:
        size = prompt_size(model, messages) or 0
        if size + reply_budget(cards) <= n_ctx:
            return Fitted(cards, messages, size, False)
    ranked = [r.card for r in shortlist(cards, question, SHORTLIST_SIZE, SHORTLIST_FLOOR)]
    smallest = size
    for k in range(len(ranked), 0, -1):
        chosen = stable_cards(ranked[:k])
        for demos in (2, 1):
            msgs = router_messages(chosen, question, demos)
            size = prompt_size(model, msgs) or 0
            smallest = min(smallest, size)
            if size + reply_budget(chosen) <= n_ctx:
                return Fitted(chosen, msgs, size, True)
    if not ranked:
        return Fitted([], [], None, True)
    raise ContextOverflowError(
        f"the router's prompt needs {smallest:,} tokens even with one tool: more than the {n_ctx:,}-token context "
        f"of model '{getattr(model, 'name', '?')}'", tokens=smallest, limit=n_ctx)


def route(model: ChatModel, cards: list[Card], question: str, *, seed: int = 0,
          min_confidence: float = 0.0) -> Route:
    """Pick a tool for `question` (greedy, grammar-constrained); below `min_confidence` the pick becomes none.
    With no cards the answer is none without a model call; so it is when the cards do not fit the context
    and none of them shares a word with the question."""
    if not cards:
        return Route(tool=NONE, chosen=NONE, note="no verified tools in the tool store")
    fitted = fit_prompt(model, cards, question)
    shown = [c.name for c in fitted.cards] if fitted.shortlisted else None
    if not fitted.cards:
        return Route(tool=NONE, chosen=NONE, shortlist=[],
                     note=f"none of the {len(cards)} tools shares a word with the question")
    cards = fitted.cards
    names = router_names(cards)
    reply = model.chat(fitted.messages, seed=seed, temperature=0.0, max_tokens=reply_budget(cards),
                       schema=router_schema(cards),
                       prefix=None if fitted.shortlisted else ROUTER_PREFIX)  # a shortlist varies by question
    try:
        chosen = json.loads(reply.text)
    except ValueError:
        chosen = reply.text.strip().strip('"')
    if chosen not in names:
        return Route(tool=NONE, chosen=str(chosen), usage=reply.usage, raw=reply.text, shortlist=shown,
                     prompt_tokens=fitted.tokens, note=f"router replied {reply.text[:40]!r}, not a tool name")
    with Stopwatch() as sw:  # the confidence's few tokens are part of what routing costs
        confidence = grammar_confidence(model, reply.usage.prompt_tokens, names)
    usage = reply.usage + Usage(wall_seconds=sw.wall_seconds, cpu_seconds=sw.cpu_seconds)
    if confidence is not None and confidence < min_confidence and chosen != NONE:
        return Route(tool=NONE, chosen=chosen, confidence=confidence, usage=usage, raw=reply.text,
                     shortlist=shown, prompt_tokens=fitted.tokens,
                     note=f"confidence {confidence:.2f} below {min_confidence:.2f}")
    return Route(tool=chosen, chosen=chosen, confidence=confidence, usage=usage, raw=reply.text, shortlist=shown,
                 prompt_tokens=fitted.tokens)


# ---- confidence from a llama.cpp model ---------------------------------------------------------------------

def _single_tokens(model: LocalModel, texts: list[str]) -> dict[bytes, int]:
    """Every substring of the allowed replies that is one vocabulary token, mapped to that token."""
    out: dict[bytes, int] = {}
    for text in texts:
        for a in range(len(text)):
            for b in range(a + 1, len(text) + 1):
                piece = text[a:b]
                if piece.encode() in out:
                    continue
                toks = model._llm.tokenize(piece.encode(), add_bos=False, special=False)
                if len(toks) == 1:
                    out[piece.encode()] = toks[0]
    return out


_PIECES: dict[tuple[int, tuple[str, ...]], dict[bytes, int]] = {}


def path_probability(rows: list[list[float]] | Any, path: list[int], pieces: dict[int, bytes],
                     replies: list[bytes], single: dict[bytes, int]) -> float:
    """Probability of the generated path under the grammar: at each step while more than one reply is still
    possible, softmax of the chosen token over the tokens the grammar allows there. Pure (rows are logits)."""
    prob, so_far = 1.0, b""
    for row, tok in zip(rows, path):
        live = [r for r in replies if r.startswith(so_far) and len(r) > len(so_far)]
        if len(live) <= 1:
            break
        allowed = {single[r[len(so_far):b]] for r in live for b in range(len(so_far) + 1, len(r) + 1)
                   if r[len(so_far):b] in single}
        allowed.add(tok)
        top = max(float(row[t]) for t in allowed)
        denom = sum(math.exp(float(row[t]) - top) for t in allowed)
        prob *= math.exp(float(row[tok]) - top) / denom
        so_far += pieces[tok]
    return prob


def grammar_confidence(model: ChatModel, prompt_tokens: int, names: list[str]) -> float | None:
    """For a LocalModel just after a routing call: re-run the reply's few tokens in one batch with logits
    for every position (llama-cpp-python keeps none by default) and return the path probability of the
    chosen name among the allowed ones. None for other backends or if llama.cpp internals differ."""
    if not isinstance(model, LocalModel) or not model.loaded:
        return None
    import numpy as np

    llm = model._llm
    with model._lock:
        try:
            start = prompt_tokens - 1
            generated = [int(t) for t in llm.input_ids[prompt_tokens: llm.n_tokens]]
            if start < 0 or not generated:
                return None
            replies = [json.dumps(n) for n in names]
            key = (id(llm), tuple(replies))
            if key not in _PIECES:
                _PIECES[key] = _single_tokens(model, replies)
            single = _PIECES[key]
            toks = [int(llm.input_ids[start])] + generated
            llm._ctx.kv_cache_seq_rm(-1, start, -1)
            llm.n_tokens = start
            llm._batch.set_batch(batch=toks, n_past=start, logits_all=True)
            llm._ctx.decode(llm._batch)
            n_vocab = llm.n_vocab()
            rows = np.ctypeslib.as_array(llm._ctx.get_logits(), shape=(len(toks) * n_vocab,)).reshape(len(toks), n_vocab)
            llm.input_ids[start: start + len(toks)] = toks
            llm.n_tokens = start + len(toks)
            pieces = {t: llm.detokenize([t]) for t in generated}
            return path_probability(rows, generated, pieces, [r.encode() for r in replies], single)
        except Exception:  # confidence is optional: never let it break routing, and leave a clean cache
            try:
                llm._ctx.kv_cache_seq_rm(-1, 0, -1)
                llm.n_tokens = 0
            except Exception:
                pass
            return None
