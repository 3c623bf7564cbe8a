"""Warm states made ahead of time: after a build, when tools are retired and when `jigwright answer` starts,
the router prompt and every tool's fill prompt (each up to the question) get a saved llama.cpp state, so the
first question of a new process does not pay for reading every usage card; states of prefixes that no longer
exist (the router prompt before a tool was added or retired, a retired tool's fill prompt) are removed."""

from __future__ import annotations

from pathlib import Path
from typing import Callable

from pydantic import BaseModel

from .execute import fill_messages, fill_prefix
from .llm import ChatModel, LocalModel
from .meter import Stopwatch
from .route import ROUTER_PREFIX, demos_per_tool, router_messages, stable_cards
from .tools import Card
from .warmstate import Shelf

# Stands for the question: only the prompt before it is evaluated and saved.
PLACEHOLDER = "?"


class PreparedState(BaseModel):
    label: str
    how: str  # ready (already saved) | saved | evaluated (could not be saved) | none (no stable prefix)
    tokens: int
    state_bytes: int


class WarmReport(BaseModel):
    states: list[PreparedState]
    removed: int
    cpu_seconds: float
    wall_seconds: float
    folder_bytes: int

    @property
    def made(self) -> int:
        return sum(s.how == "saved" for s in self.states)


def prepare(model: ChatModel, cards: list[Card], *, note: Callable[[str], None] | None = None) -> WarmReport | None:
    """Make sure the router's and each card's fill state are saved (evaluating those that are missing), then
    remove this model's router and fill states that belong to none of them. None for a model that is not a
    local llama.cpp model, or with no cards (nothing to route to) or warm states turned off."""
    shelf = Shelf()
    if not isinstance(model, LocalModel) or not cards or not shelf.enabled:
        return None
    cards = stable_cards(cards)
    jobs = [(ROUTER_PREFIX, router_messages(cards, PLACEHOLDER, demos_per_tool(cards)))]
    jobs += [(fill_prefix(c), fill_messages(c, PLACEHOLDER)) for c in cards]
    states: list[PreparedState] = []
    keep: set[Path] = set()
    with Stopwatch() as sw:
        for i, (prefix, messages) in enumerate(jobs, 1):
            if note:
                note(f"warm state {i}/{len(jobs)}: {prefix.label}")
            got = model.keep_prefix(messages, prefix)
            if got.file is not None:
                keep.add(got.file)
            states.append(PreparedState(label=prefix.label, how=got.how, tokens=got.tokens,
                                        state_bytes=got.state_bytes))
    removed = 0
    for path, head in shelf.heads().items():
        label = head.label
        if (head.key.model_sha256 == model.spec.sha256 and path not in keep
                and (label == ROUTER_PREFIX.label or label.startswith("fill:"))):
            shelf.discard(path)
            removed += 1
    return WarmReport(states=states, removed=removed, cpu_seconds=round(sw.cpu_seconds, 3),
                      wall_seconds=round(sw.wall_seconds, 3), folder_bytes=shelf.total_bytes())


def prepare_from_store(model: ChatModel, *, note: Callable[[str], None] | None = None) -> WarmReport | None:
    """`prepare` for the verified tools in the tool store."""
    from .store import ToolStore

    with ToolStore() as store:
        cards = [t.card for t in store.tools(verified_only=True)]
    return prepare(model, cards, note=note)


__all__ = ["PLACEHOLDER", "PreparedState", "WarmReport", "prepare", "prepare_from_store"]
