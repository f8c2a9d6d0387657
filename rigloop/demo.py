"""The built-in demonstration (``rigloop demo`` / ``make demo``)."""

from __future__ import annotations


def main(args) -> int:
    print("rigloop demo: not built yet")
    return 0
