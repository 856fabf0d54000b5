"""emispec: estimate clock-harmonic emissions and their margins to a limit line.

emispec gives estimates, not compliance results: final compliance is decided
by measurement at an accredited lab under the applicable regulations and
standards.
"""

__version__ = "0.1.0"

from .board import Board, BoardError, load_board  # noqa: E402
from .limits import Limit, load_limit  # noqa: E402
from .margin import Estimate, estimate  # noqa: E402

__all__ = ["__version__", "Board", "BoardError", "load_board", "Limit", "load_limit", "Estimate", "estimate"]
