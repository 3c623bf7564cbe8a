"""Test doubles of the model backend, for control-flow tests of the builder, router and run loop.

`ScriptedModel` implements `ChatModel.chat` and replies from a script: a list of texts used in order, or a
callable that decides per call. It keeps every call (messages and keywords) for assertions, and imitates
llama.cpp's prompt cache: a prompt's "tokens" are its words, and the tokens it shares as a prefix with the
previous call's prompt count as cached."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

from runner.llm import Message, Reply, check_fits
from runner.meter import Usage
from runner.warmstate import PromptPrefix

Script = list[str] | Callable[..., "str | Reply"]


@dataclass
class Call:
    messages: list[Message]
    seed: int
    temperature: float
    max_tokens: int
    stop: list[str] | None
    schema: dict | None
    prefix: PromptPrefix | None = None

    @property
    def system(self) -> str:
        return next((m["content"] for m in self.messages if m["role"] == "system"), "")

    @property
    def last_user(self) -> str:
        return next((m["content"] for m in reversed(self.messages) if m["role"] == "user"), "")


def prompt_tokens(messages: list[Message]) -> list[str]:
    out: list[str] = []
    for m in messages:
        out.append(f"<{m['role']}>")
        out.extend(m["content"].split())
    return out


@dataclass
class ScriptedModel:
    """A ChatModel that answers from a script. A callable script is called as
    `script(messages, seed=..., temperature=..., max_tokens=..., stop=..., schema=...)` and returns the reply
    text (or a whole Reply); it may raise to simulate a failure or an interrupt."""

    name: str
    replies: Script
    cpu_per_prompt_token: float = 0.001
    cpu_per_completion_token: float = 0.004
    calls: list[Call] = field(default_factory=list)
    _last_prompt: list[str] = field(default_factory=list)
    n_ctx: int | None = None  # set to check prompts against a context as LocalModel does (tokens are words)

    def prompt_tokens(self, messages: list[Message]) -> int:
        return len(prompt_tokens(messages))

    def chat(self, messages: list[Message], *, seed: int, temperature: float, max_tokens: int,
             stop: list[str] | None = None, schema: dict | None = None, prefix: PromptPrefix | None = None) -> Reply:
        if self.n_ctx is not None:
            check_fits(self.name, self.prompt_tokens(messages), max_tokens, self.n_ctx)
        self.calls.append(Call(list(messages), seed, temperature, max_tokens, stop, schema, prefix))
        if callable(self.replies):
            out = self.replies(messages, seed=seed, temperature=temperature, max_tokens=max_tokens, stop=stop,
                               schema=schema)
        else:
            if not self.replies:
                raise AssertionError(f"{self.name}: the script has no reply left for call {len(self.calls)}")
            out = self.replies.pop(0)
        if isinstance(out, Reply):
            return out
        tokens = prompt_tokens(messages)
        cached = 0
        for a, b in zip(tokens, self._last_prompt):
            if a != b:
                break
            cached += 1
        cached = min(cached, max(len(tokens) - 1, 0))
        self._last_prompt = tokens
        completion = max(1, len(out.split()))
        cpu = (len(tokens) - cached) * self.cpu_per_prompt_token + completion * self.cpu_per_completion_token
        return Reply(text=out, usage=Usage(prompt_tokens=len(tokens), completion_tokens=completion,
                                           cached_tokens=cached, wall_seconds=cpu / 2, cpu_seconds=cpu))

    def routed(self) -> list[Call]:
        """The calls that were routing calls (their schema is a string enum)."""
        return [c for c in self.calls if c.schema and c.schema.get("type") == "string" and "enum" in c.schema]


def is_fill(messages) -> bool:
    """Whether a chat is the executor filling a tool's arguments (prompts/executor_fill.j2). Fills are asked
    first without a schema, so scripts tell them apart by their system prompt, not by the schema."""
    return bool(messages) and messages[0]["content"].startswith("You fill in the arguments")
