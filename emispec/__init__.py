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

The names below are imported on first use, so that ``import emispec`` (and the
command line's ``--version`` and ``--help``) does not load numpy and scipy.
"""

import importlib

__version__ = "0.3.0"

#: The one line every output carries.
CAUTION = (
    "Estimate only: final compliance is decided by measurement at an accredited lab "
    "under the applicable regulations and standards."
)

_API = {
    "Board": "board", "load_board": "board", "read_board_data": "board",
    "BoardError": "schema", "InputError": "errors",
    "Limit": "limits", "load_limit": "limits",
    "Estimate": "pipeline", "estimate": "pipeline", "swept_spectrum": "pipeline",
    "Template": "parameters", "Parameter": "parameters",
    "Ensemble": "ensemble", "EnsembleResult": "ensemble", "evaluate": "ensemble",
    "Variant": "explore", "Solution": "explore",
    "Verdict": "rows",
    "vary": "api", "solve": "api", "test_plan": "api",
}

__all__ = ["__version__", "CAUTION", *_API]


def __getattr__(name: str):
    if name in _API:
        value = getattr(importlib.import_module(f".{_API[name]}", __name__), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'emispec' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
