"""The builder pipeline: shape → draft → repair → verify → card, with a report of what each step cost.

A small builder succeeds by structure: each step is small, several samples are drawn, every candidate is checked
mechanically, failures go back with exact feedback, and only a tool that verifies end to end on held-out
examples (executor fills the arguments, the tool computes) is stored as verified.
"""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import dataclass, field
from typing import Any, Callable, Iterator

from pydantic import BaseModel, Field

from . import probe, prompts, readwords, shapecheck
from .execute import REL_TOL, Filled, answers_match, fill_arguments
from .family import Example, Family, load_family, parse_solved, read_hints, read_lines  # noqa: F401
from .fingerprint import code_fingerprint
from .llm import ChatModel, Message
from .meter import Usage
from .sandbox import Limits
from .store import ToolStore
from .tools import Card, Demo, ExampleCheck, Provenance, Tool

STEPS = ("shape", "draft", "repair", "verify", "card")
# a probe input is a guess near the family's domain: a candidate that runs long on it just does not count
PROBE_LIMITS = Limits(cpu_seconds=0.5, wall_seconds=2.0)
STRATEGIES = ("direct", "search", "choose", "simulate", "permute")
TEMPLATES = ("shape_system.j2", "shape_demo.j2", "shape_user.j2", "shape_feedback.j2", "draft_system.j2", "draft.j2",
             "strategy_direct.j2", "strategy_search.j2", "strategy_choose.j2", "strategy_permute.j2",
             "strategy_simulate.j2", "repair.j2", "executor_fill.j2", "hints.j2")
# The choose strategy's solve: try each value found at the answer's place in the arguments (a path such as
# "crew[].name", see shapecheck.answer_paths), return the first for which the builder's `holds` is True.
CHOOSE_SOLVE = """

def candidate_values(arguments, path):
    values = [arguments]
    for step in path.replace("[]", ".[]").split("."):
        if step == "[]":
            values = [item for v in values if isinstance(v, list) for item in v]
        elif step:
            values = [v[step] for v in values if isinstance(v, dict) and step in v]
    return values


def solve(**arguments):
    for x in candidate_values(arguments, PATH):
        if holds(x, **arguments):
            return x
    return None
"""
SHAPE_DEMOS = 3  # worked demonstrations in prompts/shape_demo.j2, of unrelated kinds in a neutral setting
SEARCH_SOLVE = "\n\ndef solve(**arguments):\n    x = 0\n    while not holds(x, **arguments):\n        x += 1\n    return x\n"


# ---- input: runner/family.py (re-exported here) ---------------------------------------------------------

# ---- settings and report ----------------------------------------------------------------------------------

class BuildSettings(BaseModel):
    """Knobs of one build. Without a CPU budget a build makes one round (each step sampled once as set here);
    with one it keeps sampling round after round (more shapes, more drafts, every strategy again) until a tool
    verifies, the budget is used up or `max_rounds` rounds are done. Sampling is seeded, so the build under a
    smaller budget is a prefix of the build under a larger one. All but the CPU budget are part of the cache
    key; the budget decides whether a stored outcome may be reused (see `budget_covers`): a verified tool is
    reused whatever the budget, a failed or unverified one only if it was not cut short by a smaller budget
    than the one asked for now."""

    draft_examples: int = 3
    choose_examples: int = 3
    shape_samples: int = 4
    # Four changes made from the tuning half's traces (docs/architecture.md): off by default, since the bench of
    # 2026-12-02 showed no gain on the check half; `bench/build_bench.py --changes` turns them on.
    shape_feedback: int = 0  # times a design with problems is sent back with them, in the same conversation
    reading_notes: bool = False  # a line on how to read clock times, dates, numbers as text, in the draft prompt
    rule_in_code: bool = False  # the family's rule repeated as a comment in the direct strategy's skeleton
    draft_samples: int = 3
    repair_rounds: int = 1
    repairs_per_strategy: int = 2
    choose_repairs: int = 0  # candidates per strategy and design repaired with the choose examples they miss
    temperature: float = 0.7
    seed: int = 0
    strategies: list[str] = Field(default_factory=lambda: list(STRATEGIES))
    min_score: float = 1.0
    max_rounds: int = 500  # a safety net only: with a budget, the budget is what ends a build
    budget_cpu_minutes: float | None = None


class StepCost(BaseModel):
    tried: int = 0
    passed: int = 0
    builder_cpu: float = 0.0
    executor_cpu: float = 0.0
    wall: float = 0.0
    builder_tokens: int = 0


class BuildReport(BaseModel):
    family: str
    tool: str
    key: str
    cache_hit: bool = False
    verified: bool = False
    held_out_score: float = 0.0  # on the confirm examples: the score that decides "verified"
    held_out: int = 0  # how many confirm examples
    choose_score: float = 0.0  # the stored candidate's score on the choose examples
    roles: dict[str, list[str]] = Field(default_factory=dict)  # draft / choose / confirm: example ids
    check_note: str = ""  # set when the examples are too few for three separate parts
    strategy: str = ""
    steps: dict[str, StepCost] = Field(default_factory=lambda: {s: StepCost() for s in STEPS})
    rounds: int = 0
    chosen: int = 0  # candidates that passed every choose example
    confirmed: int = 0  # candidates that went on to pass every confirm example too
    failed_at: str = ""  # where the best attempt failed: shape, draft, repair, fill, choose, confirm ("" if verified)
    verified_cpu: float | None = None  # total CPU seconds when a candidate first verified
    stopped: str = ""
    failures: list[str] = Field(default_factory=list)
    budget_cpu_minutes: float | None = None
    runner: str = ""
    contested: list[dict[str, Any]] = Field(default_factory=list)  # probe.Contest records: inputs candidates disagree on
    agreement: float | None = None  # share of probe inputs on which every other passing candidate agrees with the tool
    probe_note: str = ""
    reused: str = ""  # how a stored tool of an older runner was reused ("" when built or found as is)

    @property
    def builder_cpu(self) -> float:
        return sum(s.builder_cpu for s in self.steps.values())

    @property
    def executor_cpu(self) -> float:
        return sum(s.executor_cpu for s in self.steps.values())

    @property
    def total_cpu(self) -> float:
        return self.builder_cpu + self.executor_cpu

    def summary(self) -> dict[str, Any]:
        data = self.model_dump()
        data.update(builder_cpu=self.builder_cpu, executor_cpu=self.executor_cpu, total_cpu=self.total_cpu)
        return data


Progress = Callable[[str, str], None]  # (step, note)
Trace = Callable[[dict[str, Any]], None]  # one record per builder exchange or candidate check


# ---- candidates ---------------------------------------------------------------------------------------------

@dataclass
class ShapeCandidate:
    objects: list[dict[str, Any]]
    problems: list[str]
    schema: dict[str, Any] | None = None
    answer_from: str = ""  # where a text answer sits in every drafting example's arguments ("" if nowhere)
    raw: list[dict[str, Any]] | None = None  # as copied from the questions, before declared conversions
    conversions: dict[str, str] = field(default_factory=dict)  # argument path -> conversion kind


@dataclass
class Candidate:
    strategy: str
    code: str
    messages: list[Message]
    reply: str
    draft_ok: int = 0
    feedback: str = ""
    checks: list[ExampleCheck] = field(default_factory=list)
    score: float = -1.0  # on the choose examples
    confirm_score: float = -1.0  # on the confirm examples (-1 until it gets there)
    failed_at: str = "unverified"

    @property
    def sort_key(self) -> tuple:
        return (bool(self.failed_at), -self.score, -self.confirm_score, -self.draft_ok, len(self.code))


def extract_code(text: str) -> str:
    """The Python code in a reply: the ```python blocks joined, else the whole reply."""
    blocks = re.findall(r"```(?:python|py)?\s*\n(.*?)```", text, flags=re.DOTALL)
    if not blocks:
        m = re.search(r"```(?:python|py)?\s*\n(.*)", text, flags=re.DOTALL)
        blocks = [m.group(1)] if m else [text]
    return "\n\n".join(b.strip("\n") for b in blocks).strip() + "\n"


def parse_arguments_reply(text: str) -> list[Any] | None:
    """The list under "arguments" in the first JSON object of a reply (fenced or not), or None.

    If that is not valid JSON because brackets went astray (a small builder sometimes closes the list after
    the first question's pieces and carries on), the JSON objects that follow "arguments": in order are
    taken instead, so that `shapecheck.merge_pieces` can join the pieces mechanically."""
    start = text.find("{")
    while start != -1:
        try:
            obj, _ = json.JSONDecoder().raw_decode(text[start:])
        except ValueError:
            start = text.find("{", start + 1)
            continue
        if isinstance(obj, dict) and isinstance(obj.get("arguments"), list):
            return obj["arguments"]
        break
    m = re.search(r'"arguments"\s*:\s*\[', text)
    if m is None:
        return None
    objects, i, decoder = [], m.end(), json.JSONDecoder()
    while i < len(text):
        if text[i] in " \t\r\n,[]":
            i += 1
            continue
        if text[i] != "{":
            break
        try:
            obj, i = decoder.raw_decode(text, i)
        except ValueError:
            break
        objects.append(obj)
    return objects or None


_MODULES = ("math", "itertools", "functools", "collections", "datetime", "calendar", "re", "string", "fractions",
            "decimal", "statistics", "heapq", "bisect", "json", "operator")
_NAMES = {"permutations": "itertools", "combinations": "itertools", "product": "itertools", "count": "itertools",
          "reduce": "functools", "Counter": "collections", "defaultdict": "collections", "deque": "collections",
          "timedelta": "datetime", "date": "datetime", "gcd": "math", "lcm": "math", "Fraction": "fractions"}


def add_missing_imports(code: str) -> str:
    """Add the allowed imports a reply uses but forgot (`math.gcd` without `import math`): a slip small models
    make often, and one a mechanical fix handles better than a repair round."""
    adds = []
    for mod in _MODULES:
        if re.search(rf"(?<![\w.]){mod}\.", code) and not re.search(rf"^\s*import\s+[\w, ]*\b{mod}\b", code, re.M):
            adds.append(f"import {mod}")
    for name, mod in _NAMES.items():
        used = re.search(rf"(?<![\w.]){name}\(", code)
        defined = re.search(rf"^\s*(from\s+\w+\s+import\s+.*\b{name}\b|def\s+{name}\b|{name}\s*=)", code, re.M)
        if used and not defined and not (name == "date" and re.search(r"^\s*import\s+datetime", code, re.M)
                                           and not re.search(r"(?<![\w.])date\(", code)):
            adds.append(f"from {mod} import {name}")
    if ((re.search(r"^\s*import\s+datetime\s*$", code, re.M) or "import datetime" in adds)
            and not re.search(r"^\s*from\s+datetime\s+import", code, re.M)):
        code = re.sub(r"(?<![\w.])datetime\.(strptime|now|today|fromisoformat|combine)\(", r"datetime.datetime.\1(", code)
    return ("\n".join(adds) + "\n\n" + code) if adds else code


def _signature(schema: dict[str, Any]) -> str:
    return ", ".join(schema.get("properties", {}))


def _answer_type(answers: list[Any]) -> str:
    if all(isinstance(a, bool) for a in answers):
        return "True or False"
    if all(isinstance(a, int) and not isinstance(a, bool) for a in answers):
        return "an int"
    if all(isinstance(a, str) for a in answers):
        if all(a.lower() in ("yes", "no") for a in answers):
            return 'the string "yes" or "no"'
        if all(re.fullmatch(r"\d{2}:\d{2}", a) for a in answers):
            return 'a string "HH:MM" with two-digit hours and minutes'
        return "a str"
    return "the same JSON type as the examples"


_CLOCK = re.compile(r"\d{1,2}:\d{2}")
_CLOCK_RANGE = re.compile(r"\d{1,2}:\d{2}\s*-\s*\d{1,2}:\d{2}")
_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")
_DECIMAL = re.compile(r"-?\d+\.\d+")


def reading_notes(objects: list[dict[str, Any]], answers: list[Any]) -> list[str]:
    """How to read the text values the arguments hold, and write the answer, where they follow a common written
    form (clock times, ranges of them, ISO dates, numbers written as text): one line each, for the draft prompt.
    Drafts on the tuning half kept calling int() on "08:30"."""
    texts = [v for o in objects for _, v in shapecheck.value_paths(o) if isinstance(v, str)]
    notes = []
    if any(_CLOCK_RANGE.fullmatch(t.strip()) for t in texts):
        notes.append('A value like "09:00-18:00" is two clock times joined by "-": '
                     'start, end = value.split("-").')
    if any(_CLOCK.fullmatch(t.strip()) or _CLOCK_RANGE.fullmatch(t.strip()) for t in texts):
        notes.append('A clock time "HH:MM" is text: its minutes after midnight are '
                     'int(t.split(":")[0]) * 60 + int(t.split(":")[1]).')
    if any(_ISO_DATE.fullmatch(t.strip()) for t in texts):
        notes.append('A date "YYYY-MM-DD" is text: datetime.date.fromisoformat(d) reads it; add days with '
                     'datetime.timedelta(days=n).')
    if any(_DECIMAL.fullmatch(t.strip()) for t in texts):
        notes.append('A number written as text ("12.50") must be read with float() before computing.')
    if answers and all(isinstance(a, str) and _CLOCK.fullmatch(a) for a in answers):
        notes.append('Write the answer m minutes after midnight as f"{m // 60:02d}:{m % 60:02d}".')
    elif answers and all(isinstance(a, str) and _ISO_DATE.fullmatch(a) for a in answers):
        notes.append("Write a date answer as d.isoformat().")
    elif answers and all(isinstance(a, str) and _DECIMAL.fullmatch(a) for a in answers):
        places = {len(a.split(".")[1]) for a in answers}
        if len(places) == 1:
            n = places.pop()
            notes.append(f'The answer is a number written as text with exactly {n} decimal(s), like {answers[0]!r}.')
    return notes


def applicable_strategies(wanted: list[str], objects: list[dict[str, Any]], answers: list[Any]) -> list[str]:
    """Strategies that fit the data: search needs whole-number answers; choose needs a text answer found at one
    place in the arguments; permute needs a list and answers that are names read off an arrangement; simulate
    needs a list."""
    has_list = any(isinstance(v, list) and len(v) >= 2 for o in objects for v in o.values())
    ints = all(isinstance(a, int) and not isinstance(a, bool) and a >= 0 for a in answers)
    names = all(isinstance(a, str) and a.lower() not in ("yes", "no") for a in answers)
    ok = {"direct": True, "search": ints, "choose": bool(shapecheck.answer_paths(objects, answers)),
          "permute": has_list and names, "simulate": has_list}
    return [s for s in wanted if ok.get(s, False)]


def inputs_key(family: Family, builder_sha: str, executor_sha: str, settings: BuildSettings) -> str:
    """What a build starts from: examples, description, float tolerance, both models, the prompt templates and
    the settings (all but the budget)."""
    payload = {"examples": [e.model_dump(exclude={"line"}) for e in family.examples], "description": family.description,
               "rel_tol": family.rel_tol, "builder": builder_sha, "executor": executor_sha,
               "templates": prompts.template_hash(*TEMPLATES),
               "settings": settings.model_dump(exclude={"budget_cpu_minutes"})}
    if family.hints:  # only when given, so builds without hints keep their keys
        payload["hints"] = family.hints
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()[:32]


def build_key(family: Family, builder_sha: str, executor_sha: str, settings: BuildSettings) -> str:
    """The tool store key of a build: its inputs and the fingerprint of the runner code that builds and checks
    (so an upgraded runner does not take an old outcome for its own)."""
    payload = {"inputs": inputs_key(family, builder_sha, executor_sha, settings), "runner": code_fingerprint("build")}
    return hashlib.sha256(json.dumps(payload, sort_keys=True).encode()).hexdigest()[:32]


def budget_covers(stored: float | None, stopped: str, wanted: float | None) -> bool:
    """Whether a failed or unverified outcome reached under budget `stored` stands for a build under budget
    `wanted`: yes if the budget did not cut it short (every sample was drawn; seeded sampling would draw the
    same again), or if `wanted` is no larger. A larger budget (or none) retries a build the budget cut short."""
    if not stopped or stored is None:
        return True
    return wanted is not None and wanted <= stored


# ---- checks shared by the builder and by tools finished by hand (runner/handfinish.py) ----------------------

def make_card(name: str, description: str, schema: dict[str, Any], drafting: list[Example],
              objects: list[dict[str, Any]]) -> Card:
    """The usage card: the drafting questions and their argument objects are the executor's demos."""
    return Card(name=name, description=description or name, schema=schema,
                demos=[Demo(question=e.question, arguments=a) for e, a in zip(drafting, objects)])


def drafting_checks(sandbox: Any, code: str, examples: list[Example], objects: list[dict[str, Any]],
                    entry: str = "solve", rel_tol: float = REL_TOL) -> list[ExampleCheck]:
    """Run the code on each drafting example's argument object in the sandbox and compare with its answer."""
    checks = []
    for ex, args in zip(examples, objects):
        res = sandbox.run(code, args, entry=entry)
        checks.append(ExampleCheck(id=ex.id, split="draft", question=ex.question, expected=ex.answer, arguments=args,
                                   got=res.value if res.status == "ok" else None,
                                   ok=res.status == "ok" and answers_match(ex.answer, res.value, rel_tol),
                                   error=None if res.status == "ok" else res.message))
    return checks


def fill_examples(executor: ChatModel, card: Card, examples: list[Example], *, seed: int,
                  before: Callable[[int], None] | None = None,
                  after: Callable[[Example, Filled], None] | None = None) -> list[Filled]:
    """The executor fills the card's arguments from each example's question, exactly as when answering a queue."""
    fills = []
    for i, ex in enumerate(examples):
        if before:
            before(i)
        # no warm state: a card under verification may never be kept
        filled = fill_arguments(executor, card, ex.question, seed=seed, keep_state=False)
        if after:
            after(ex, filled)
        fills.append(filled)
    return fills


def held_out_checks(sandbox: Any, code: str, examples: list[Example], fills: list[Filled],
                    entry: str = "solve", rel_tol: float = REL_TOL, split: str = "held_out") -> list[ExampleCheck]:
    """End to end on held-out examples: the executor's arguments go into the code in the sandbox, and the value
    is compared with the expected answer (a fill that did not fit the schema is a miss)."""
    checks = []
    for ex, filled in zip(examples, fills):
        if filled.arguments is None:
            checks.append(ExampleCheck(id=ex.id, split=split, question=ex.question, expected=ex.answer,
                                       ok=False, error=filled.error))
            continue
        res = sandbox.run(code, filled.arguments, entry=entry)
        checks.append(ExampleCheck(id=ex.id, split=split, question=ex.question, expected=ex.answer,
                                   arguments=filled.arguments, got=res.value if res.status == "ok" else None,
                                   ok=res.status == "ok" and answers_match(ex.answer, res.value, rel_tol),
                                   error=None if res.status == "ok" else res.message))
    return checks


# ---- the pipeline -------------------------------------------------------------------------------------------

class BudgetExhausted(Exception):
    pass


def _answer_key(example: Example) -> str:
    answer = example.answer.strip().lower() if isinstance(example.answer, str) else example.answer
    return json.dumps(answer, sort_keys=True)


def spread(examples: list[Example], n: int) -> list[Example]:
    """n of the examples, in file order, covering as many different answers as they can: the first example of
    each answer not yet taken, then the rest in file order. Three drafting examples that all answer "no" let
    `return "no"` pass them (a build on the tuning half spent its budget on such drafts)."""
    picked: list[int] = []
    seen: set[str] = set()
    for i, ex in enumerate(examples):
        if len(picked) < n and _answer_key(ex) not in seen:
            picked.append(i)
            seen.add(_answer_key(ex))
    picked += [i for i in range(len(examples)) if i not in picked][: n - len(picked)]
    return [examples[i] for i in sorted(picked)]


def split_examples(examples: list[Example], draft_n: int, choose_n: int
                   ) -> tuple[list[Example], list[Example], list[Example], str]:
    """The examples in three parts: draft (shown to the builder), choose (pick among candidates, and tell a
    repair where a candidate goes wrong) and confirm (only a candidate that also passes these is verified; they
    take no part in making or picking it). Each part is taken in file order; where the answers come from a small
    set (at most half as many different answers as examples), each part prefers examples whose answer it does
    not hold yet (`spread`). With too few examples for three parts the choose examples also
    confirm, and the note says the check is weaker."""
    d = min(draft_n, len(examples) - 1)
    # only where answers come from a small set (yes/no, a few names): elsewhere a repeat is chance
    few = len({_answer_key(e) for e in examples}) * 2 <= len(examples)
    spread_ = spread if few else (lambda part, n: part[:n])
    draft = spread_(examples, d)
    rest = [e for e in examples if not any(e is x for x in draft)]
    if len(rest) >= 4:
        c = min(choose_n, len(rest) // 2)
        choose = spread_(rest, c)
        confirm = [e for e in rest if not any(e is x for x in choose)]
        note = "" if c >= 3 and len(confirm) >= 3 else (
            f"weaker check: {len(choose)} example(s) chose among candidates and {len(confirm)} confirmed "
            f"(9 examples give 3 to draft, 3 to choose and 3 to confirm)")
        return draft, choose, confirm, note
    return draft, rest, rest, (f"weaker check: the same {len(rest)} example(s) chose among candidates and "
                               f"confirmed the tool (9 examples give 3 to draft, 3 to choose and 3 to confirm)")


def fill_suspect(example: Example, arguments: dict[str, Any] | None) -> bool:
    """Whether a miss looks like the executor's fault: no argument object, or one that leaves out or invents a
    number or name the question states (the same mechanical checks the shape step uses)."""
    if arguments is None:
        return True
    problems = shapecheck.shape_problems([example.question], [example.answer], [arguments])
    return any("missing" in p or "not in the question" in p for p in problems)


class Builder:
    """One build of one family. Models, sandbox and store are given, so tests can pass doubles of the models."""

    def __init__(self, family: Family, *, builder: ChatModel, executor: ChatModel, sandbox: Any,
                 settings: BuildSettings, builder_sha: str = "", executor_sha: str = "",
                 progress: Progress | None = None, trace: Trace | None = None):
        self.trace = trace or (lambda record: None)
        self.family, self.builder, self.executor, self.sandbox = family, builder, executor, sandbox
        self.settings = settings
        self.builder_sha, self.executor_sha = builder_sha, executor_sha
        self.progress = progress or (lambda step, note: None)
        self.drafting, self.choosing, self.confirming, note = split_examples(
            family.examples, settings.draft_examples, settings.choose_examples)
        self.shared_check = self.choosing is self.confirming
        self.key = build_key(family, builder_sha, executor_sha, settings)
        self.inputs_key = inputs_key(family, builder_sha, executor_sha, settings)
        self.report = BuildReport(family=family.name, tool=family.name, key=self.key, held_out=len(self.confirming),
                                  check_note=note,
                                  roles={"draft": [e.id for e in self.drafting], "choose": [e.id for e in self.choosing],
                                         "confirm": [e.id for e in self.confirming]},
                                  budget_cpu_minutes=settings.budget_cpu_minutes, runner=code_fingerprint("build"))
        self._seed = settings.seed
        self._seen_shapes: set[str] = set()
        self._fills: dict[tuple[str, str], list[Filled]] = {}
        self._reached = ""  # the furthest step any attempt reached
        self.best_draft: tuple[Candidate, ShapeCandidate] | None = None  # most drafting examples passed so far
        self.passing: list[tuple[Candidate, ShapeCandidate]] = []  # every candidate that passed its drafting examples

    # kept for callers that still speak of one held-out part
    @property
    def held_out(self) -> list[Example]:
        return self.confirming

    # -- accounting
    def _next_seed(self) -> int:
        self._seed += 1
        return self._seed

    def _charge(self, step: str, usage: Usage, who: str) -> None:
        cost = self.report.steps[step]
        if who == "builder":
            cost.builder_cpu += usage.cpu_seconds
            cost.builder_tokens += usage.prompt_tokens + usage.completion_tokens
        else:
            cost.executor_cpu += usage.cpu_seconds
        cost.wall += usage.wall_seconds
        budget = self.settings.budget_cpu_minutes
        if budget is not None and self.report.total_cpu > budget * 60:
            raise BudgetExhausted(f"CPU budget of {budget:g} min used up during {step}")

    def _ask_builder(self, step: str, messages: list[Message], *, temperature: float, max_tokens: int,
                     schema: dict | None = None) -> str:
        reply = self.builder.chat(messages, seed=self._next_seed(), temperature=temperature,
                                  max_tokens=max_tokens, schema=schema)
        self._charge(step, reply.usage, "builder")
        self.trace({"step": step, "prompt": messages[-1]["content"], "reply": reply.text,
                    "usage": reply.usage.model_dump()})
        return reply.text

    # -- shape
    def shape_messages(self) -> list[Message]:
        questions = [e.question for e in self.drafting]
        msgs: list[Message] = [{"role": "system", "content": prompts.render("shape_system.j2")}]
        for index in range(SHAPE_DEMOS):
            msgs += [{"role": "user", "content": prompts.render("shape_demo.j2", part="user", index=index)},
                     {"role": "assistant", "content": prompts.render("shape_demo.j2", part="assistant", index=index)}]
        return msgs + [{"role": "user", "content": prompts.render("shape_user.j2", description=self.family.description,
                                                                  hints=self.family.hints, questions=questions)}]

    def shapes(self, round_: int = 0) -> Iterator[ShapeCandidate]:
        """Sampled argument designs, mechanically repaired (pieces joined, extra fields dropped, keys that name
        one field differently unified, values written as words read as numbers) and checked. A proposal with
        problems goes back to the builder with them, in the same conversation (`shape_feedback` times), and the
        answer is checked again. Proposals with no problem are yielded as they come; once this round's samples are drawn, those with only soft problems
        follow, fewest problems first. A design seen in an earlier round is not yielded again.

        No grammar here. `bench/shape_grammar.py` (3 shape replies each way) measured a free-form JSON grammar at
        1.1-1.3x the builder's CPU per generated token; free replies were read as argument objects in 3 of 3 on
        departures and 1 of 3 on working_days, under the grammar 3 of 3 on both. Whether to ask under a grammar
        is left for a measurement on the tuning half (working_days is a check family)."""
        msgs = self.shape_messages()
        budget = 100 + sum(len(e.question) for e in self.drafting)  # JSON of times and dates runs long
        soft: list[tuple[int, int, ShapeCandidate]] = []
        n = self.settings.shape_samples
        for i in range(n):
            label = f"{round_ * n + i + 1}"
            self.progress("shape", f"sample {label}" + (f" (round {round_ + 1})" if round_ else f"/{n}"))
            temp = 0.2 if (i == 0 and round_ == 0) else self.settings.temperature
            conversation = list(msgs)
            for attempt in range(1 + self.settings.shape_feedback):
                text = self._ask_builder("shape", conversation, temperature=temp, max_tokens=budget)
                self.report.steps["shape"].tried += 1
                read = self.read_shape(text)
                if read is None:
                    self.report.failures.append(f"shape {label}: reply is not the expected JSON")
                    problems = ['the reply must be JSON of the form {"arguments": [one object per question]}']
                else:
                    converted, raw, conversions, problems = read
                    sig = json.dumps(converted, sort_keys=True)
                    if sig in self._seen_shapes:
                        break
                    self._seen_shapes.add(sig)
                    self.trace({"step": "shape-check", "arguments": converted, "conversions": conversions,
                                "problems": problems, "attempt": attempt})
                    if not problems:
                        self.report.steps["shape"].passed += 1
                        yield self.shape_candidate(converted, [], raw, conversions)
                        break
                    self.report.failures.append(f"shape {label}: " + "; ".join(problems[:3]))
                    if not any(shapecheck.is_hard(p) for p in problems):
                        soft.append((len(problems), i, self.shape_candidate(converted, [f"{len(problems)} soft"],
                                                                            raw, conversions)))
                # the same conversation again, told exactly what the checks found (a tuning-half build proposed
                # four designs that each left out the slot length, and drafted from them in vain)
                conversation = conversation + [
                    {"role": "assistant", "content": text},
                    {"role": "user", "content": prompts.render("shape_feedback.j2", problems=problems[:8],
                                                               count=len(self.drafting))}]
                if attempt < self.settings.shape_feedback:
                    self.progress("shape", f"sample {label}: asking again with {len(problems)} problem(s)")
        for n_problems, i, cand in sorted(soft, key=lambda t: (t[0], t[1])):
            self.progress("shape", f"trying a design despite {n_problems} soft problem(s)")
            yield cand

    def read_shape(self, text: str) -> tuple[list[Any], list[Any], dict[str, str], list[str]] | None:
        """A shape reply read and mechanically repaired (pieces joined, keys unified and made parameter names, words
        read as numbers, extra fields dropped): (argument objects, as written, declared conversions, problems), or None when
        the reply holds no argument list."""
        questions = [e.question for e in self.drafting]
        answers = [e.answer for e in self.drafting]
        objects = parse_arguments_reply(text)
        if objects is None:
            return None
        objects = shapecheck.merge_pieces(len(questions), objects)
        objects = shapecheck.parameter_keys(shapecheck.unify_keys(objects))
        raw, converted, conversions = readwords.convert_objects(objects)
        checked_questions = readwords.convert_questions(questions, raw, converted)
        converted = shapecheck.prune_extras(checked_questions, answers, converted)
        if conversions:  # the fields pruned from the converted objects go from the copies as written too
            raw = [{k: v for k, v in r.items() if k in c} for r, c in zip(raw, converted)]
            conversions = readwords.declared_conversions(raw)
        else:
            raw = converted
        return converted, raw, conversions, shapecheck.shape_problems(checked_questions, answers, converted)

    def shape_candidate(self, objects: list[dict[str, Any]], problems: list[str],
                        raw: list[dict[str, Any]] | None = None,
                        conversions: dict[str, str] | None = None) -> ShapeCandidate:
        """An argument design ready to draft from: its inferred schema (loosened where values are converted,
        since the executor copies them as written) and where a text answer sits in it."""
        answer_from = next(iter(shapecheck.answer_paths(objects, [e.answer for e in self.drafting])), "")
        schema = readwords.loosen_schema(shapecheck.infer_schema(objects), conversions or {})
        return ShapeCandidate(objects=objects, problems=problems, schema=schema, answer_from=answer_from,
                              raw=raw, conversions=dict(conversions or {}))

    # -- draft and repair
    def draft_messages(self, shape: ShapeCandidate, strategy: str) -> list[Message]:
        examples = [{"question": e.question, "arguments": a, "answer_repr": repr(e.answer)}
                    for e, a in zip(self.drafting, shape.objects)]
        assert shape.schema is not None
        user = prompts.render("draft.j2", description=self.family.description, hints=self.family.hints,
                              schema=shape.schema,
                              examples=examples, strategy=strategy, signature=_signature(shape.schema),
                              answer_type=_answer_type([e.answer for e in self.drafting]),
                              answer_from=shape.answer_from,
                              reading=reading_notes(shape.objects, [e.answer for e in self.drafting])
                              if self.settings.reading_notes else [],
                              rule_in_code=self.settings.rule_in_code)
        return [{"role": "system", "content": prompts.render("draft_system.j2")},
                {"role": "user", "content": user}]

    def assemble(self, strategy: str, reply: str, shape: ShapeCandidate) -> str:
        code = add_missing_imports(extract_code(reply))
        if strategy == "search":
            code = code.rstrip() + "\n" + SEARCH_SOLVE
        elif strategy == "choose":
            code = code.rstrip() + "\n" + CHOOSE_SOLVE.replace("PATH", repr(shape.answer_from))
        if shape.conversions:
            code = readwords.wrap_tool(code, shape.conversions)
        return code

    def check_on_drafting(self, cand: Candidate, shape: ShapeCandidate) -> None:
        """Run the candidate on the drafting examples; every failure, in order, becomes exact feedback."""
        cand.draft_ok, cand.feedback = 0, ""
        for ex, args in zip(self.drafting, shape.objects):
            res = self.sandbox.run(cand.code, args)
            call = f"solve(**{json.dumps(args, ensure_ascii=False)})"
            if res.status != "ok":
                fb = f"{call} failed: {res.message}"
                if res.error_kind == "timeout":
                    fb += " (it ran too long: make sure every loop ends)"
                lines = cand.code.splitlines()
                if res.line and 0 < res.line <= len(lines):  # the line that failed, as the builder wrote it
                    fb += f"\n  line {res.line}: {lines[res.line - 1].strip()}"
            elif not answers_match(ex.answer, res.value, self.family.rel_tol):
                fb = f"{call} must return {ex.answer!r} but returned {res.value!r}."
            else:
                cand.draft_ok += 1
                continue
            # every failing example, not only the first: a fix for one example alone tends to break another
            cand.feedback = f"{cand.feedback}\n{fb}" if cand.feedback else fb
            if res.status != "ok" and res.error_kind == "timeout":
                break
        self.trace({"step": "check", "strategy": cand.strategy, "passed": cand.draft_ok,
                    "of": len(self.drafting), "feedback": cand.feedback})
        if self.best_draft is None or cand.draft_ok > self.best_draft[0].draft_ok:
            self.best_draft = (cand, shape)

    def draft(self, shape: ShapeCandidate, strategy: str, round_: int = 0) -> list[Candidate]:
        msgs = self.draft_messages(shape, strategy)
        out = []
        for i in range(self.settings.draft_samples):
            self.progress("draft", f"{strategy} sample {i + 1}/{self.settings.draft_samples}"
                          + (f" (round {round_ + 1})" if round_ else ""))
            temp = 0.2 if (i == 0 and round_ == 0) else self.settings.temperature
            text = self._ask_builder("draft", msgs, temperature=temp, max_tokens=400)
            cand = Candidate(strategy=strategy, code=self.assemble(strategy, text, shape), messages=msgs, reply=text)
            self.check_on_drafting(cand, shape)
            self.report.steps["draft"].tried += 1
            if cand.draft_ok == len(self.drafting):
                self.report.steps["draft"].passed += 1
            out.append(cand)
        return out

    def repair(self, cand: Candidate, shape: ShapeCandidate) -> Candidate:
        fixed = cand
        for r in range(self.settings.repair_rounds):
            self.progress("repair", f"{cand.strategy} round {r + 1}/{self.settings.repair_rounds}")
            fixed = self.repair_once(fixed, shape, fixed.feedback)
            if fixed.draft_ok == len(self.drafting):
                break
        return fixed

    def repair_once(self, cand: Candidate, shape: ShapeCandidate, feedback: str) -> Candidate:
        """The candidate's conversation, told `feedback`; the reply checked on the drafting examples and counted
        as a repair."""
        msgs = cand.messages + [{"role": "assistant", "content": cand.reply},
                                {"role": "user", "content": prompts.render("repair.j2", feedback=feedback)}]
        text = self._ask_builder("repair", msgs, temperature=self.settings.temperature, max_tokens=400)
        fixed = Candidate(strategy=cand.strategy, code=self.assemble(cand.strategy, text, shape), messages=msgs,
                          reply=text)
        self.check_on_drafting(fixed, shape)
        self.report.steps["repair"].tried += 1
        if fixed.draft_ok == len(self.drafting):
            self.report.steps["repair"].passed += 1
        return fixed

    def choose_feedback(self, cand: Candidate) -> str:
        """The choose examples a candidate got wrong, as exact feedback: the question, the arguments the
        executor filled from it, what the function returned and what it must return. Misses whose arguments look
        like the executor's fault are left out (they would send a repair after a mistake the code did not make)."""
        lines = []
        for ex, check in zip(self.choosing, [c for c in cand.checks if c.split == "choose"]):
            if check.ok or check.arguments is None or fill_suspect(ex, check.arguments):
                continue
            call = f"solve(**{json.dumps(check.arguments, ensure_ascii=False)})"
            got = f"failed: {check.error}" if check.error else f"returned {check.got!r}"
            lines.append(f"Question: {ex.question}\n{call} must return {ex.answer!r} but {got}.")
        return "\n".join(lines)

    def repair_after_choose(self, cand: Candidate, shape: ShapeCandidate) -> Candidate | None:
        """One repair of a candidate that passed its drafting examples but not every choose example, told which
        further questions it gets wrong (the choose examples thereby also shape candidates; the confirm
        examples still take no part). None when no miss can be told."""
        feedback = self.choose_feedback(cand) if not self.shared_check else ""
        if not feedback:  # with few examples the choose examples also confirm: they must stay out of repairs
            return None
        self.progress("repair", f"{cand.strategy}: fixing what the choose examples found")
        return self.repair_once(cand, shape, "It passes those examples but gives wrong answers on other questions "
                                             "of the same kind:\n" + feedback
                                + "\nThe solved examples above must still pass.")

    # -- verify: choose among candidates, then confirm
    def card(self, shape: ShapeCandidate) -> Card:
        assert shape.schema is not None
        return make_card(self.family.name, self.family.description, shape.schema, self.drafting,
                         shape.raw or shape.objects)

    def draft_checks(self, code: str, shape: ShapeCandidate) -> list[ExampleCheck]:
        """What the tool returns on each drafting example, as it returned it (not a copy of the expected
        answer), so a stored tool's record shows its own results."""
        return drafting_checks(self.sandbox, code, self.drafting, shape.objects, rel_tol=self.family.rel_tol)

    def fills_for(self, part: str, examples: list[Example], shape: ShapeCandidate, card: Card) -> list[Filled]:
        """The executor's arguments for one part's questions under one argument design (filled once, kept)."""
        key = (part, json.dumps(shape.objects, sort_keys=True))
        if key not in self._fills:
            def after(ex: Example, filled: Filled) -> None:
                self._charge("verify", filled.usage, "executor")
                self.trace({"step": "fill", "part": part, "question": ex.question, "arguments": filled.arguments,
                            "error": filled.error, "usage": filled.usage.model_dump()})

            self._fills[key] = fill_examples(
                self.executor, card, examples, seed=self.settings.seed, after=after,
                before=lambda i: self.progress("verify", f"executor fills {part} example {i + 1}/{len(examples)}"))
        return self._fills[key]

    def score(self, cand: Candidate, part: str, examples: list[Example], fills: list[Filled]
              ) -> tuple[float, list[ExampleCheck], int]:
        """The candidate on one part's examples with executor-filled arguments: (score, checks, misses that look
        like the executor's fault)."""
        checks = held_out_checks(self.sandbox, cand.code, examples, fills, rel_tol=self.family.rel_tol, split=part)
        ok = sum(c.ok for c in checks)
        fill_misses = sum(1 for ex, filled, c in zip(examples, fills, checks)
                          if not c.ok and (filled.arguments is None or fill_suspect(ex, filled.arguments)))
        score = ok / len(examples) if examples else 0.0
        self.trace({"step": part, "strategy": cand.strategy, "score": score,
                    "misses": [c.model_dump() for c in checks if not c.ok]})
        return score, checks, fill_misses

    def verify(self, cand: Candidate, shape: ShapeCandidate, card: Card) -> None:
        """Choose, then confirm: a candidate is verified only if it passes every choose example and then every
        confirm example (with few examples the two parts are the same examples; the report says so)."""
        draft_checks = self.draft_checks(cand.code, shape)
        self.report.steps["verify"].tried += 1
        fills = self.fills_for("choose", self.choosing, shape, card)
        cand.score, checks, fill_misses = self.score(cand, "choose", self.choosing, fills)
        cand.checks = draft_checks + checks
        if cand.score < self.settings.min_score:
            misses = sum(not c.ok for c in checks)
            cand.failed_at = "fill" if fill_misses and fill_misses * 2 >= misses else "choose"
            return
        self.report.chosen += 1
        if self.shared_check:
            cand.confirm_score = cand.score
        else:
            fills = self.fills_for("confirm", self.confirming, shape, card)
            cand.confirm_score, checks, fill_misses = self.score(cand, "confirm", self.confirming, fills)
            cand.checks += checks
            if cand.confirm_score < self.settings.min_score:
                misses = sum(not c.ok for c in checks)
                cand.failed_at = "fill" if fill_misses and fill_misses * 2 >= misses else "confirm"
                return
        self.report.confirmed += 1
        self.report.steps["verify"].passed += 1
        cand.failed_at = ""

    # -- the whole build
    def try_shape(self, shape: ShapeCandidate, round_: int, best: list) -> bool:
        """Every strategy that fits this design: draft, repair the closest misses, verify what passes. True once a
        candidate verifies; `best` holds the best (candidate, shape, card) so far."""
        card = self.card(shape)
        n = len(self.drafting)
        for strategy in applicable_strategies(self.settings.strategies, shape.objects,
                                              [e.answer for e in self.drafting]):
            cands = self.draft(shape, strategy, round_)
            self._reach("draft")
            failing = sorted((c for c in cands if c.draft_ok < n), key=lambda c: (-c.draft_ok, len(c.code)))
            passing = [c for c in cands if c.draft_ok == n]
            if not passing:
                for c in failing[: self.settings.repairs_per_strategy]:
                    self._reach("repair")
                    fixed = self.repair(c, shape)
                    if fixed.draft_ok == n:
                        passing.append(fixed)
                        break
                    failing.append(fixed)
            if not passing:
                failing.sort(key=lambda c: (-c.draft_ok, len(c.code)))
                self.report.failures.append(f"{strategy}: best draft feedback: {failing[0].feedback.splitlines()[0]}"
                                            if failing and failing[0].feedback else f"{strategy}: no candidates")
                continue
            self.passing += [(c, shape) for c in _dedupe(passing)]
            if self.verify_all(_dedupe(passing), shape, card, best):
                return True
            # the closest candidate that failed on choose examples (not on the executor's fills) is told its
            # misses and repaired once; it must pass its drafting examples again, then choose and confirm
            near = sorted((c for c in _dedupe(passing) if c.failed_at == "choose"), key=lambda c: c.sort_key)
            for c in near[: self.settings.choose_repairs]:
                fixed = self.repair_after_choose(c, shape)
                if fixed is not None and fixed.draft_ok == n:
                    self.passing.append((fixed, shape))
                    if self.verify_all([fixed], shape, card, best):
                        return True
            if best:
                bad = [ch for ch in best[0][0].checks if not ch.ok]
                if bad:
                    self.report.failures.append(
                        f"{strategy}: {bad[0].split} {best[0][0].score:.2f}; e.g. {bad[0].id}: expected "
                        f"{bad[0].expected!r}, got {bad[0].got!r} {bad[0].error or ''}".strip())
        return False

    def verify_all(self, cands: list[Candidate], shape: ShapeCandidate, card: Card, best: list) -> bool:
        """Verify each candidate not verified before; `best` keeps the best so far. True once one verifies."""
        for c in cands:
            if c.code in self._verified_codes:
                continue
            self._verified_codes.add(c.code)
            self.verify(c, shape, card)
            self._reach(c.failed_at or "confirm")
            if not best or c.sort_key < best[0][0].sort_key:
                best[:] = [(c, shape, card)]
            if not c.failed_at:
                return True
        return False

    _ORDER = ("shape", "draft", "repair", "fill", "choose", "confirm")

    def _reach(self, step: str) -> None:
        if self._ORDER.index(step) > (self._ORDER.index(self._reached) if self._reached else -1):
            self._reached = step

    def run(self) -> tuple[Candidate | None, ShapeCandidate | None, Card | None]:
        """Round after round while the budget lasts: new shape samples (tried as they come), then more drafts
        for every design found earlier. Without a budget, one round."""
        best: list = []
        self._verified_codes: set[str] = set()
        pool: list[ShapeCandidate] = []
        rounds = self.settings.max_rounds if self.settings.budget_cpu_minutes is not None else 1
        self._reach("shape")
        try:
            for r in range(rounds):
                self.report.rounds = r + 1
                old = list(pool)
                for shape in self.shapes(r):
                    pool.append(shape)
                    if self.try_shape(shape, r, best):
                        return self._finish(best)
                for shape in old:
                    self.progress("draft", f"round {r + 1}: more drafts for an earlier design")
                    if self.try_shape(shape, r, best):
                        return self._finish(best)
        except BudgetExhausted as exc:
            self.report.stopped = str(exc)
        return self._finish(best)

    def probe(self, cand: Candidate, shape: ShapeCandidate) -> None:
        """Run the chosen tool and every other candidate that passed the drafting examples under the same design
        on mutated and schema-drawn arguments (runner/probe.py); record the contested inputs, phrased like a
        drafting question where the values swap one for one, and how often the others agree with the tool."""
        if shape.schema is None:
            return
        self.progress("verify", "probing for inputs the examples miss")
        codes = [cand.code] + [c.code for c, s in self.passing if s.objects == shape.objects and c.code != cand.code]
        inputs = probe.probe_inputs(shape.schema, shape.objects, seed=self.settings.seed)

        def run(code: str, args: dict[str, Any]) -> tuple[bool, Any]:
            res = self.sandbox.run(code, args, limits=PROBE_LIMITS)
            return res.status == "ok", res.value

        found = probe.compare(codes, inputs, run)
        demos = [(e.question, o) for e, o in zip(self.drafting, shape.objects)] if not shape.conversions else []
        for c in found.contested:
            c.question = probe.phrase(c.arguments, demos)
        self.report.contested = [c.model_dump() for c in found.contested]
        self.report.agreement = found.agreement
        self.report.probe_note = (found.note or f"{found.inputs} probe inputs, {found.candidates} passing candidates")

    def _finish(self, best: list) -> tuple[Candidate | None, ShapeCandidate | None, Card | None]:
        if best and not best[0][0].failed_at:
            self.report.verified_cpu = self.report.total_cpu
            self.report.failed_at = ""
        else:
            self.report.failed_at = best[0][0].failed_at if best else (
                self._reached if self._reached in ("draft", "repair") else "shape")
        return best[0] if best else (None, None, None)


def _dedupe(cands: list[Candidate]) -> list[Candidate]:
    seen, out = set(), []
    for c in cands:
        if c.code not in seen:
            seen.add(c.code)
            out.append(c)
    return out


def _tool(b: Builder, family: Family, cand: Candidate, card: Card, report: BuildReport, builder: ChatModel,
          executor: ChatModel) -> Tool:
    settings = b.settings
    return Tool(key=b.key, name=family.name, description=card.description, code=cand.code, card=card,
                verified=report.verified, held_out_score=report.held_out_score, checks=cand.checks,
                provenance=Provenance(builder_model=getattr(builder, "name", "?"), builder_sha256=b.builder_sha,
                                      executor_model=getattr(executor, "name", "?"), executor_sha256=b.executor_sha,
                                      template_hashes=prompts.template_hash(*TEMPLATES),
                                      settings=settings.model_dump(), family_file=family.source,
                                      examples_sha256=hashlib.sha256(json.dumps(
                                          [e.model_dump(exclude={"line"}) for e in family.examples], sort_keys=True
                                      ).encode()).hexdigest(), strategy=cand.strategy,
                                      runner=code_fingerprint("build"), inputs_key=b.inputs_key),
                report=report.model_dump())


def reverify(b: Builder, old: Tool) -> Candidate | None:
    """Check a verified tool of an older runner again with this runner (drafting examples in the sandbox,
    held-out examples filled by the executor): the candidate with its new checks, or None if its card does
    not match the family's drafting examples."""
    if [d.question for d in old.card.demos] != [e.question for e in b.drafting]:
        return None
    shape = ShapeCandidate(objects=[d.arguments for d in old.card.demos], problems=[], schema=old.card.schema_)
    cand = Candidate(strategy=old.provenance.strategy, code=old.code, messages=[], reply="")
    b.progress("verify", f"checking '{old.name}' (built by runner {old.provenance.runner or 'of unknown version'}) "
                         f"with this runner")
    b.verify(cand, shape, old.card)
    if not all(c.ok for c in cand.checks if c.split == "draft") and not cand.failed_at:
        cand.failed_at = "draft"
    return cand


def build(family: Family, *, builder: ChatModel, executor: ChatModel, sandbox: Any, store: ToolStore,
          settings: BuildSettings, builder_sha: str = "", executor_sha: str = "", force: bool = False,
          progress: Progress | None = None, trace: Trace | None = None) -> tuple[Tool | None, BuildReport]:
    """Build (or fetch from the tool store) the tool for a family; a failed build is stored unverified.

    Reuse: the same build (inputs and runner code) verified before is returned whatever the budget; one that
    failed is returned unless a budget larger than the one that cut it short is asked for. A verified tool
    from the same inputs but an older runner is checked again and reused only if it still verifies."""
    b = Builder(family, builder=builder, executor=executor, sandbox=sandbox, settings=settings,
                builder_sha=builder_sha, executor_sha=executor_sha, progress=progress, trace=trace)
    wanted = settings.budget_cpu_minutes
    if not force:
        cached = store.by_key(b.key)
        if cached is not None:
            report = BuildReport.model_validate(cached.report)
            if cached.verified or budget_covers(report.budget_cpu_minutes, report.stopped, wanted):
                report.cache_hit = True
                return cached, report
        failed = store.failed(b.key)
        if failed is not None:
            report = BuildReport.model_validate_json(failed)
            if budget_covers(report.budget_cpu_minutes, report.stopped, wanted):
                report.cache_hit = True
                return None, report
        old = store.get(family.name, missing_ok=True)
        if (old is not None and old.verified and old.key != b.key and old.provenance.inputs_key == b.inputs_key):
            try:
                cand = reverify(b, old)
            except BudgetExhausted as exc:
                b.report.stopped, cand = str(exc), None
            if cand is not None and not cand.failed_at:
                report = b.report
                report.verified, report.strategy = True, cand.strategy
                report.held_out_score, report.choose_score = max(cand.confirm_score, 0.0), max(cand.score, 0.0)
                report.reused = (f"tool built by runner {old.provenance.runner or '(unknown)'} verified again by "
                                 f"runner {code_fingerprint('build')}")
                report.steps["card"].tried = report.steps["card"].passed = 1
                tool = _tool(b, family, cand, old.card, report, builder, executor)
                store.put(tool)
                return tool, report
            b.report.failures.append(f"the stored tool of an older runner no longer verifies "
                                     f"(confirm {max(cand.confirm_score, 0.0) if cand else 0:.2f}); building afresh")
    cand, shape, card = b.run()
    report = b.report
    if cand is None or shape is None or card is None:
        report.verified = False
        if b.best_draft is None:
            store.put_failed(b.key, report.model_dump_json())
            return None, report
        # nothing passed its drafting examples; the closest attempt is kept, unverified, to finish by hand
        cand, shape = b.best_draft
        card = b.card(shape)
        cand.checks = drafting_checks(sandbox, cand.code, b.drafting, shape.objects, rel_tol=family.rel_tol)
        cand.score, cand.confirm_score, cand.failed_at = 0.0, 0.0, cand.failed_at or "draft"
        cand.checks += [ExampleCheck(id=e.id, split=part, question=e.question, expected=e.answer, ok=False,
                                     error="not checked: no draft passed its drafting examples")
                        for part, examples in (("choose", b.choosing), ("confirm", b.confirming))
                        for e in (examples if part == "choose" or not b.shared_check else [])]
        report.failures.append(f"best attempt kept unverified: {cand.strategy}, {cand.draft_ok}/{len(b.drafting)} "
                               "drafting examples (`jigwright tools edit` finishes it by hand)")
    report.verified = not cand.failed_at and bool(cand.checks) and all(c.ok for c in cand.checks)
    if not cand.failed_at:
        b.probe(cand, shape)
    report.held_out_score = max(cand.confirm_score, 0.0)
    report.choose_score = max(cand.score, 0.0)
    report.strategy = cand.strategy
    report.steps["card"].tried = report.steps["card"].passed = 1
    tool = _tool(b, family, cand, card, report, builder, executor)
    store.put(tool)
    return tool, report
