"""argparse value types shared by every sub-command (standard library only).

Each raises ``argparse.ArgumentTypeError`` with a message naming what was expected, so
usage errors read the same in every command and exit with status 2.
"""

from __future__ import annotations

import argparse


def relative_tolerance(text: str) -> float:
    """``--rtol``: a number strictly between 0 and 1."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--rtol must be a number, got {text!r}") from None
    if not (0.0 < value < 1.0):
        raise argparse.ArgumentTypeError(f"--rtol must be between 0 and 1 (exclusive), got {text}")
    return value


def seconds(text: str) -> float:
    """A duration in seconds, >= 0."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number of seconds, got {text!r}") from None
    if not value >= 0:
        raise argparse.ArgumentTypeError(f"expected a number of seconds >= 0, got {text}")
    return value


def whole_number(minimum: int):  # type: ignore[no-untyped-def]
    """A type accepting whole numbers >= ``minimum``."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"expected a whole number >= {minimum}, got {text}")
        return value

    return parse


def positive_number(text: str) -> float:
    """A number strictly greater than 0 (a time budget, a rate)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"expected a number > 0, got {text}")
    return value
