"""A cheap lexical shortlist of tools for a question: BM25+ (rank_bm25) between the question and each usage
card's name, description and demo questions. The router uses it when the cards do not all fit the executor's
context; other code may use the scores to see how clearly one tool leads.

BM25+ rather than the plain Okapi form: its inverse document frequency stays positive however few cards
there are (Okapi's turns negative for a word in more than half of them, which upsets small tool stores).
The part every card gets alike (the +delta floor) is taken off, so a score is 0 exactly when the card shares
no word with the question."""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache

from rank_bm25 import BM25Plus

from .tools import Card

_WORD = re.compile(r"[^\W_]+", re.UNICODE)


def words(text: str) -> list[str]:
    """Lower-case word tokens (punctuation and underscores split words). Numbers are left out: they are the
    data of one question (minutes, dates, codes), not what kind of question it is, and matching them ranked
    unrelated cards whose demos happen to hold the same numbers."""
    return [w for w in _WORD.findall(text.casefold()) if not w.isdigit()]


def card_text(card: Card) -> str:
    """What a card offers the lexical match: its name (hyphens as spaces), description and demo questions."""
    return " ".join([card.name.replace("-", " "), card.description, *(d.question for d in card.demos)])


@dataclass(frozen=True)
class Ranked:
    """One card and its BM25 score for the question (higher is closer; 0 means no word in common)."""

    card: Card
    score: float


@lru_cache(maxsize=8)
def _index(texts: tuple[str, ...]) -> BM25Plus:
    return BM25Plus([words(t) or ["\u2205"] for t in texts])


def rank(cards: list[Card], question: str) -> list[Ranked]:
    """Every card with its score, best first (ties keep card order)."""
    if not cards:
        return []
    bm25 = _index(tuple(card_text(c) for c in cards))
    query = words(question)
    floor = bm25.delta * sum(bm25.idf.get(q, 0.0) for q in query)  # what every card scores, matching or not
    scores = [max(float(x) - floor, 0.0) for x in bm25.get_scores(query)]
    order = sorted(range(len(cards)), key=lambda i: (-float(scores[i]), i))
    return [Ranked(cards[i], float(scores[i])) for i in order]


def shortlist(cards: list[Card], question: str, k: int, floor: float = 0.0) -> list[Ranked]:
    """The `k` cards closest to the question, best first, leaving out cards that share no word with it (so a
    question unlike every tool gets an empty shortlist) and cards scoring below `floor` times the best."""
    ranked = [r for r in rank(cards, question)[:k] if r.score > 0]
    return [r for r in ranked if r.score >= floor * ranked[0].score] if ranked else []


def margin(ranked: list[Ranked]) -> float:
    """How far the best card leads the second (its score over the second's; infinite with one card)."""
    if not ranked:
        return 0.0
    if len(ranked) == 1 or ranked[1].score <= 0:
        return float("inf")
    return ranked[0].score / ranked[1].score


__all__ = ["Ranked", "card_text", "margin", "rank", "shortlist", "words"]
