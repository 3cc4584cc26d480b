"""Messages of the command line: on stderr, so that stdout carries only data (tables, JSON,
paths); ``-q`` keeps only errors, ``-v`` adds detail."""

from __future__ import annotations

import sys

QUIET, NORMAL, VERBOSE = 0, 1, 2
_level = NORMAL


def set_level(level: int) -> None:
    global _level
    _level = level


def say(line: str) -> None:
    """Progress and notes (hidden by ``-q``)."""
    if _level >= NORMAL:
        print(line, file=sys.stderr, flush=True)


def detail(line: str) -> None:
    """Detail shown with ``-v`` only."""
    if _level >= VERBOSE:
        print(line, file=sys.stderr, flush=True)
