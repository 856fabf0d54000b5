"""emispec: estimate clock-harmonic emissions and their margins to a limit line.

emispec gives estimates, not compliance results: final compliance is decided
by measurement at an accredited lab under the applicable regulations and
standards.

Python use::

    import emispec
    board = emispec.load_board("samples/beehive-gateway.toml")
    result = emispec.estimate(board)
    variants = emispec.vary("samples/beehive-gateway.toml", {"clock[sdram_clk].rise_time": ["0.5 ns", "1 ns"]})
    solution = emispec.solve("samples/beehive-gateway.toml", "clock[sdram_clk].rise_time", "0.2 ns", "4 ns")
"""

__version__ = "0.1.0"

from .board import Board, BoardError, load_board, read_board_data  # noqa: E402
from .ensemble import Ensemble, EnsembleResult, evaluate  # noqa: E402
from .explore import Solution, Variant  # noqa: E402
from .explore import solve as _solve  # noqa: E402
from .explore import vary as _vary  # noqa: E402
from .limits import Limit, load_limit  # noqa: E402
from .parameters import Parameter, Template  # noqa: E402
from .pipeline import Estimate, estimate, swept_spectrum  # noqa: E402
from .plan import plan_rows  # noqa: E402
from .rows import Verdict  # noqa: E402

__all__ = [
    "__version__", "Board", "BoardError", "load_board", "read_board_data", "Limit", "load_limit", "Estimate",
    "estimate", "swept_spectrum", "vary", "solve", "test_plan", "Variant", "Solution", "Template", "Parameter",
    "Ensemble", "EnsembleResult", "evaluate", "Verdict",
]


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
