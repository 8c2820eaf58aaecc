"""Argument types shared by the command-line modules (argparse reports their messages)."""

from __future__ import annotations

import argparse


def positive_int(text: str) -> int:
    """An integer ≥ 1, e.g. a count or a resolution."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive integer, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a positive integer, got {value}")
    return value
