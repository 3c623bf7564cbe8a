"""The tool record: what a verified tool is, how the executor uses it, and where it came from."""

from __future__ import annotations

import re
from datetime import datetime, timezone
from typing import Any, Literal

from pydantic import BaseModel, Field


class Demo(BaseModel):
    """One solved question as the executor sees it: the question and the tool arguments it maps to."""

    question: str
    arguments: dict[str, Any]


class Card(BaseModel):
    """The usage card: all the router and executor need to pick the tool and fill its arguments."""

    name: str
    description: str
    schema_: dict[str, Any] = Field(alias="schema")
    demos: list[Demo]

    model_config = {"populate_by_name": True}


class ExampleCheck(BaseModel):
    """How the tool did on one example during the build."""

    id: str
    split: Literal["draft", "choose", "confirm", "held_out"]  # held_out: tools built before choose/confirm
    question: str
    expected: Any
    arguments: dict[str, Any] | None = None
    got: Any = None
    ok: bool
    error: str | None = None


class Provenance(BaseModel):
    """What produced the tool, so a build is reproducible and its cost is known."""

    builder_model: str
    builder_sha256: str
    executor_model: str
    executor_sha256: str
    template_hashes: dict[str, str]
    settings: dict[str, Any]
    family_file: str
    examples_sha256: str
    strategy: str = ""
    origin: Literal["built", "edited by hand", "written by hand"] = "built"
    created: str = Field(default_factory=lambda: datetime.now(timezone.utc).isoformat(timespec="seconds"))
    runner: str = Field("", description="the runner's code fingerprint at build time ('' before it was kept)")
    inputs_key: str = Field("", description="the build key without the runner's fingerprint")


class Tool(BaseModel):
    """A built tool: code with a `solve(**arguments)` entry, its argument schema, card and verification."""

    key: str
    name: str
    description: str
    code: str
    entry: str = "solve"
    card: Card
    verified: bool
    held_out_score: float
    checks: list[ExampleCheck]
    provenance: Provenance
    report: dict[str, Any] = Field(default_factory=dict)

    @property
    def schema_(self) -> dict[str, Any]:
        return self.card.schema_


def slug(text: str) -> str:
    """A tool name from free text: lower-case letters, digits and hyphens."""
    s = re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")
    return s or "tool"
