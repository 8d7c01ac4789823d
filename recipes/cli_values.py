"""Value types for the command line's options: each parses one option's text or raises
``argparse.ArgumentTypeError`` (a usage error, exit 2) naming the value and what is expected."""

from __future__ import annotations

import argparse


def int_at_least(low: int):
    """argparse type: an integer >= ``low`` (a usage error, exit 2, otherwise)."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            value = None
        if value is None or value < low:
            raise argparse.ArgumentTypeError(f"expected an integer >= {low}, got {text!r}")
        return value

    return parse


positive_int, nonneg_int = int_at_least(1), int_at_least(0)


def grid_shape(text: str) -> tuple[int, int]:
    try:
        rows, cols = (int(v) for v in text.lower().split("x"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected ROWSxCOLS, e.g. 2x3, got {text!r}") from None
    return rows, cols


def edge_list(text: str) -> list[tuple[int, int]]:
    try:
        return [tuple(int(v) for v in pair.split("-")) for pair in word_list(text)]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected edges like 0-1,1-2, got {text!r}") from None


def nonneg_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number >= 0, got {text!r}") from None
    if not value >= 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a finite number >= 0, got {text!r}")
    return value


def int_list(text: str) -> list[int]:
    try:
        values = [int(v) for v in text.split(",") if v.strip()]
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected comma-separated integers, e.g. 2,4,6, got {text!r}") from None
    if not values or min(values) < 1:
        raise argparse.ArgumentTypeError(f"expected positive integers, got {text!r}")
    return values


def word_list(text: str) -> list[str]:
    return [v.strip() for v in text.split(",") if v.strip()]


def names(text: str) -> list[str]:
    """A non-empty comma-separated list (an empty one would run nothing and say nothing)."""
    words = word_list(text)
    if not words:
        raise argparse.ArgumentTypeError(f"expected at least one name, got {text!r}")
    return words


def data_files(text: str) -> dict[int | None, str]:
    """``--data``: one file (its qubit count read from it) or ``N=file,M=file`` pairs."""
    if "=" not in text:
        return {None: text}
    files: dict[int | None, str] = {}
    for item in word_list(text):
        size, _, path = item.partition("=")
        try:
            n = int(size)
        except ValueError:
            n = 0
        if n < 1 or not path:
            raise argparse.ArgumentTypeError(
                f"expected QUBITS=FILE pairs, e.g. 4=a.npz,6=b.npz, got {item!r}")
        if n in files:
            raise argparse.ArgumentTypeError(f"qubit count {n} is given twice in {text!r}")
        files[n] = path
    return files
