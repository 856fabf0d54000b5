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
from .explore import Solution, Variant, plan_rows  # noqa: E402
from .explore import solve as _solve  # noqa: E402
from .explore import vary as _vary  # noqa: E402
from .limits import Limit, load_limit  # noqa: E402
from .margin import Estimate, estimate, swept_spectrum  # noqa: E402

__all__ = [
    "__version__", "Board", "BoardError", "load_board", "Limit", "load_limit", "Estimate", "estimate",
    "swept_spectrum", "vary", "solve", "test_plan", "Variant", "Solution",
]


def vary(board_file, changes: dict, mode: str = "cross") -> list[Variant]:
    """Estimate a board file with each combination of values (see :func:`emispec.explore.vary`)."""
    data, file, base_dir, _ = read_board_data(board_file)
    return _vary(data, file, base_dir, changes, mode)


def solve(board_file, key: str, low: str, high: str, points: int = 17, scope: str | None = "auto") -> Solution:
    """The value of ``key`` in [low, high] that just keeps the guard band (see :func:`emispec.explore.solve`)."""
    data, file, base_dir, _ = read_board_data(board_file)
    return _solve(data, file, base_dir, key, low, high, points, scope=scope)


def test_plan(result: Estimate, everything: bool = False) -> list[dict]:
    """What to measure first, worst margin first (see :func:`emispec.explore.plan_rows`)."""
    return plan_rows(result, everything)
