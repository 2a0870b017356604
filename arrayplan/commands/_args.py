"""Argument types shared by several commands."""

from __future__ import annotations

import argparse

__all__ = ["csv_names"]


def csv_names(text: str) -> list[str]:
    """A comma-separated list of unique, non-empty names (argparse type)."""
    names = [v.strip() for v in text.split(",")]
    if not all(names):
        raise argparse.ArgumentTypeError(f"empty name in {text!r}")
    if len(set(names)) != len(names):
        raise argparse.ArgumentTypeError(f"names must be unique, got {text!r}")
    return names
