"""The sandbox's records at its boundary: limits for a call, the result of a call, and the layer report."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

ErrorKind = Literal["screen", "timeout", "memory", "exception", "bad_return", "output", "crashed"]


class Limits(BaseModel):
    """Resource limits for one tool call. File access, sockets and new processes are denied by the OS layers."""

    model_config = ConfigDict(frozen=True, extra="forbid")

    cpu_seconds: float = Field(default=5.0, gt=0, le=3600)
    wall_seconds: float = Field(default=10.0, gt=0, le=3600)
    memory_mb: int = Field(default=512, ge=64, le=1 << 20)
    open_files: int = Field(default=16, ge=8, le=4096)
    stdout_bytes: int = Field(default=64 * 1024, ge=0)
    value_bytes: int = Field(default=1024 * 1024, ge=16)


class RunResult(BaseModel):
    """The outcome of one tool call; `message` is one line, fit to show to a model as feedback."""

    status: Literal["ok", "error"]
    value: Any = None
    error_kind: ErrorKind | None = None
    message: str = ""
    line: int | None = None
    stdout: str = ""
    cpu_seconds: float = 0.0
    wall_seconds: float = 0.0

    @property
    def ok(self) -> bool:
        return self.status == "ok"


class Layer(BaseModel):
    """One operating-system layer of the sandbox as set up on this machine: what it is, whether it held, why."""

    model_config = ConfigDict(frozen=True)

    name: str
    active: bool
    mode: str
    detail: str
