"""The one exception family. The CLI turns each class into a one-line message and its own exit code."""

from __future__ import annotations


class JigwrightError(Exception):
    """Base of every error the CLI reports as a one-line message."""

    exit_code = 1


class ConfigError(JigwrightError):
    """models.toml (or another settings file) is malformed: file, line, what is wrong."""

    exit_code = 3


class UnknownModelError(JigwrightError):
    """A model name that models.toml does not list."""

    exit_code = 4


class ModelMissingError(JigwrightError):
    """The model file is not on disk (the message says which command fetches it)."""

    exit_code = 5


class ModelIntegrityError(JigwrightError):
    """Size or SHA-256 of a model file differs from models.toml."""

    exit_code = 6


class NotGGUFError(JigwrightError):
    """The file is unreadable, truncated or not a GGUF file."""

    exit_code = 7


class FetchError(JigwrightError):
    """Downloading or assembling model weights failed."""

    exit_code = 8


class InputError(JigwrightError):
    """A user-supplied file (family, queue) has a bad line: file, line, what is wrong."""

    exit_code = 9


class ToolNotFoundError(JigwrightError):
    """No tool of that name in the tool store."""

    exit_code = 10


class BuildFailedError(JigwrightError):
    """A build ended with no verified tool."""

    exit_code = 11


class SandboxError(JigwrightError):
    """The sandbox itself could not run (not a tool failure: those are results)."""

    exit_code = 12


class ModelRuntimeError(JigwrightError):
    """llama.cpp failed to load or run a model."""

    exit_code = 13


class OutputError(JigwrightError):
    """An output file (the answers file) could not be written: disk full, read-only, gone."""

    exit_code = 14


class ContextOverflowError(JigwrightError):
    """A prompt (with room for its reply) does not fit the model's context; nothing was sent."""

    exit_code = 15

    def __init__(self, message: str, *, tokens: int, limit: int):
        super().__init__(message)
        self.tokens = tokens
        self.limit = limit


class StoreError(JigwrightError):
    """The tool store's files cannot be read (a damaged SQLite database, say): folder and how to recover."""

    exit_code = 16


class ModelLoadError(ModelRuntimeError):
    """llama.cpp could not load a model file at all (every task would fail the same way)."""


class ClusterError(JigwrightError):
    """A run on many workers could not start or go on: Ray missing, a worker unlike the driver, every worker gone."""

    exit_code = 17
