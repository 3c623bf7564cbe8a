"""From the queue to a new family: group the questions no tool answered (routed to none, or fell back) by the
words they share, and write a family folder for each group large enough, for a person to finish: answers to
fill in, a name to check, a line of description.

Words are weighted with scikit-learn's TfidfVectorizer (letters only: the numbers, codes and times that
differ from one question to the next say nothing about its kind) and grouped by AgglomerativeClustering
with average linkage on cosine distance, cut at a distance threshold, so the number of groups is not fixed
in advance."""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

from pydantic import BaseModel, ValidationError

from .errors import InputError
from .queue import NONE_ROUTE, AnswerRecord
from .tools import slug

MIN_GROUP = 5
EXAMPLES = 6
THRESHOLD = 0.85  # cosine distance at which groups stop merging; see tests/test_suggest.py for what it separates


class Unanswered(BaseModel):
    id: str
    question: str


class Group(BaseModel):
    """One group of similar unanswered questions, most typical first, and where its family folder went."""

    name: str
    questions: list[Unanswered]
    words: list[str]
    folder: str = ""


class Suggestion(BaseModel):
    unanswered: int
    groups: list[Group]  # groups of at least min_group questions, written as folders
    left: int  # unanswered questions in smaller groups


def read_unanswered(path: Path) -> list[Unanswered]:
    """Questions of an answers file that no tool answered: routed to none, or fell back (the tool failed or did
    not fit). Error records (bad queue lines) are skipped; a line that is not an answer record is an
    InputError naming file and line. A question asked twice is kept once."""
    try:
        lines = path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: cannot read the answers file: {getattr(exc, 'strerror', None) or exc}") from exc
    out: dict[str, Unanswered] = {}
    for n, line in enumerate(lines, 1):
        if not line.strip():
            continue
        try:
            rec = AnswerRecord.model_validate_json(line)
        except ValidationError as exc:
            first = exc.errors()[0]
            where = ".".join(str(p) for p in first["loc"]) or "(line)"
            raise InputError(f"{path}:{n}: not an answer record ({where}: {first['msg']})") from None
        if rec.status == "error" or not rec.question:
            continue
        if rec.status in ("fallback", "failed") or rec.route == NONE_ROUTE:
            out.setdefault(" ".join(rec.question.split()).casefold(), Unanswered(id=rec.id, question=rec.question))
    return list(out.values())


def group_questions(questions: list[str], threshold: float = THRESHOLD) -> tuple[list[list[int]], list[list[str]]]:
    """Indices of similar questions, each group most typical first (nearest its centre), largest group first;
    and each group's most telling words."""
    import numpy as np
    from sklearn.cluster import AgglomerativeClustering
    from sklearn.feature_extraction.text import TfidfVectorizer

    if len(questions) < 2:
        return ([list(range(len(questions)))] if questions else []), [[] for _ in questions[:1]]
    vectorizer = TfidfVectorizer(token_pattern=r"(?u)\b[^\W\d_]{3,}\b", stop_words="english", sublinear_tf=True)
    try:
        matrix = vectorizer.fit_transform(questions)
    except ValueError:  # no words at all (questions of numbers only)
        return [list(range(len(questions)))], [[]]
    dense = matrix.toarray()
    labels = AgglomerativeClustering(n_clusters=None, distance_threshold=threshold, metric="cosine",
                                     linkage="average").fit_predict(dense)
    vocab = vectorizer.get_feature_names_out()
    groups, words = [], []
    for label in sorted(set(labels), key=lambda lab: (-int((labels == lab).sum()), int(np.argmax(labels == lab)))):
        members = [i for i in range(len(questions)) if labels[i] == label]
        centre = dense[members].mean(axis=0)
        members.sort(key=lambda i: (-float(dense[i] @ centre), i))
        groups.append(members)
        words.append([str(vocab[j]) for j in np.argsort(-centre, kind="stable")[:4] if centre[j] > 0])
    return groups, words


def suggested_name(words: list[str], taken: set[str]) -> str:
    """Two of the group's telling words (not two forms of one word), made unique among `taken`."""
    chosen: list[str] = []
    for w in words:
        if not any(w[:4] == c[:4] for c in chosen):
            chosen.append(w)
    base = slug("-".join(chosen[:2])) if chosen else "new-family"
    name, k = base, 2
    while name in taken:
        name, k = f"{base}-{k}", k + 1
    return name


def family_toml(name: str, group: Group, source: Path) -> str:
    return (f"# Suggested by `jigwright suggest` from {len(group.questions)} questions that no tool answered in\n"
            f"# {source} (words they share: {', '.join(group.words) or '-'}).\n"
            "# Before building: check the name, say in one line what the questions ask, fill in every answer in\n"
            "# examples.jsonl (the build refuses empty ones), and if you like add a line or two of hints stating\n"
            "# the rule the way you would tell a new colleague. Then: jigwright build FOLDER/examples.jsonl\n"
            f"name = {json.dumps(name)}\n"
            'description = ""\n'
            "hints = []\n")


def write_folder(out_dir: Path, group: Group, source: Path, examples: int = EXAMPLES) -> Path:
    """The group's family folder, written whole or not at all: examples.jsonl (the most typical questions
    with empty answers), family.toml (a stub with the suggested name) and queue.jsonl (all its questions, to
    answer once the tool exists)."""
    out_dir.mkdir(parents=True, exist_ok=True)
    folder = out_dir / group.name
    if folder.exists():
        raise InputError(f"{folder} already exists; move it away or give another --out")
    files = {
        "examples.jsonl": "".join(json.dumps({"id": q.id, "question": q.question, "answer": None},
                                             ensure_ascii=False) + "\n" for q in group.questions[:examples]),
        "family.toml": family_toml(group.name, group, source),
        "queue.jsonl": "".join(json.dumps({"id": q.id, "question": q.question}, ensure_ascii=False) + "\n"
                               for q in group.questions),
    }
    tmp = Path(tempfile.mkdtemp(dir=out_dir, prefix=f".{group.name}-"))
    try:
        for fname, text in files.items():
            (tmp / fname).write_text(text, encoding="utf-8")
        os.rename(tmp, folder)
    except OSError as exc:
        for p in tmp.glob("*"):
            p.unlink()
        tmp.rmdir()
        raise InputError(f"{folder}: cannot write the family folder: {exc.strerror}") from exc
    return folder


def suggest(answers: Path, out_dir: Path, *, min_group: int = MIN_GROUP, threshold: float = THRESHOLD,
            write: bool = True) -> Suggestion:
    """Group the unanswered questions of `answers` and write a family folder per group of at least
    `min_group` questions under `out_dir`."""
    if min_group < 2:
        raise InputError("--min-group must be at least 2")
    pending = read_unanswered(answers)
    index, word_lists = group_questions([q.question for q in pending], threshold)
    taken: set[str] = set()
    groups, left = [], 0
    for members, words in zip(index, word_lists):
        if len(members) < min_group:
            left += len(members)
            continue
        name = suggested_name(words, taken)
        taken.add(name)
        groups.append(Group(name=name, questions=[pending[i] for i in members], words=words))
    if write:
        clash = [g.name for g in groups if (out_dir / g.name).exists()]
        if clash:  # checked before writing any, so a rerun never leaves half of its folders
            raise InputError(f"{out_dir / clash[0]} already exists (from an earlier run?); move it away or give "
                             "another --out")
        for g in groups:
            g.folder = str(write_folder(out_dir, g, answers))
    return Suggestion(unanswered=len(pending), groups=groups, left=left)


__all__ = ["Group", "Suggestion", "Unanswered", "read_unanswered", "group_questions", "suggest", "write_folder",
           "MIN_GROUP", "EXAMPLES", "THRESHOLD"]
