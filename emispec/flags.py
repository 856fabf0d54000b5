"""The flags a row can carry: one declaration each, with its short code and meaning.

A model that raises a flag declares it here with :func:`declare` (near field
in coupling, anti-resonance in decoupling, ...); the outputs take the order,
the short codes of the terminal table and the legend from this registry, so a
new flag is one declaration beside the code that sets it.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Flag", "FLAGS", "declare", "short_code", "names"]


@dataclass(frozen=True)
class Flag:
    """A row flag: its name in JSON, its short code in the terminal table, and what it means."""

    name: str
    short: str
    meaning: str
    rank: int


#: Every declared flag by name.
FLAGS: dict[str, Flag] = {}


def declare(name: str, short: str, meaning: str, rank: int) -> str:
    """Declare a flag (once) and return its name.

    ``rank`` orders flags in every output (row flags first, then paths,
    waveform, decoupling); ``overlaps:<source>`` flags come last.
    """
    FLAGS.setdefault(name, Flag(name, short, meaning, rank))
    return name


def names() -> tuple[str, ...]:
    """Declared flags in output order."""
    return tuple(sorted(FLAGS, key=lambda n: (FLAGS[n].rank, n)))


def short_code(name: str) -> str:
    """The terminal table's code of a flag; ``overlaps:<source>`` becomes ``+<source>``."""
    if name.startswith("overlaps:"):
        return "+" + name.split(":", 1)[1]
    return FLAGS[name].short if name in FLAGS else name


OVER_LIMIT = declare("over-limit", "OVER", "over the limit", 0)
WITHIN_GUARD_BAND = declare("within-guard-band", "guard", "inside the guard band", 1)
OVERLAPS = "overlaps:"
