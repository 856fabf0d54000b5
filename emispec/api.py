"""The Python API's conveniences that take a board file or a template."""

from __future__ import annotations

from .explore import Solution, Variant
from .explore import solve as _solve
from .explore import vary as _vary
from .parameters import Template
from .pipeline import Estimate
from .plan import plan_rows

__all__ = ["vary", "solve", "test_plan"]


def _template(board) -> Template:
    return board if isinstance(board, Template) else Template.load(board)


def vary(board_file, changes: dict, mode: str = "cross", executor=None) -> list[Variant]:
    """Estimate a board file (or a :class:`Template`) with each combination of values (see :func:`emispec.explore.vary`)."""
    return _vary(_template(board_file), changes, mode, executor=executor)


def solve(board_file, key: str, low: str, high: str, points: int = 17, scope: str | None = "auto") -> Solution:
    """The value of ``key`` in [low, high] that just keeps the guard band (see :func:`emispec.explore.solve`)."""
    return _solve(_template(board_file), key, low, high, points, scope=scope)


def test_plan(result: Estimate, everything: bool = False) -> list[dict]:
    """What to measure first, worst margin first (see :func:`emispec.plan.plan_rows`)."""
    return plan_rows(result, everything)
