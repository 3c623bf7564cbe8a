"""Jigwright: offline builder/executor runner for local language models."""

__version__ = "0.1.0"
