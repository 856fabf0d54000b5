"""Uncertain inputs: the board's ``[[tolerance]]`` entries, their distributions and their draws.

An entry puts a distribution on one numeric key of a clock, current, path or
rail (any key path that ``emispec vary --set`` accepts)::

    [[tolerance]]
    key = "clock[sdram_clk].rise_time"
    distribution = "uniform"        # uniform | triangular | normal | lognormal
    low = "0.45 ns"
    high = "0.8 ns"

Values are in the key's own unit (dB for a common-mode ratio).  ``normal``
has its mean and ``lognormal`` its median at the key's nominal value;
``sigma`` is the standard deviation in the key's unit, or relative to the
nominal value when written in % (lognormal: one sigma multiplies the value by
1 + sigma).  Both are cut at ``truncate`` sigmas (default 3) and, where that
reaches beyond the key's allowed range, at the range: the draw comes from the
distribution truncated to it (the mass cut off is reported).  Triangular takes
``low``, ``high`` and ``mode`` (default: the nominal value).  Entries sharing a
``group`` take one draw together (fully correlated: the same quantile of each
of their distributions).

Draws are reproducible: chunk ``k`` of :data:`CHUNK` samples draws from the
``k``-th child of ``numpy.random.SeedSequence(seed)``, so the same seed gives
the same samples however the chunks are spread over workers.

References
----------
Papoulis, A., Pillai, S. U., *Probability, Random Variables and Stochastic
Processes*, 4th ed., McGraw-Hill, 2002: sampling by the inverse distribution
function; truncated distributions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .board import NAME
from .parameters import Template, _si_value
from .schema import BoardError, Key, TableReader
from .units import format_quantity, parse_quantity

__all__ = ["DISTRIBUTIONS", "CHUNK", "Tolerance", "read_tolerances", "draw", "draw_units"]

DISTRIBUTIONS = ("uniform", "triangular", "normal", "lognormal")

#: Samples per chunk: the unit of work and of random streams (fixed, so results do not depend on the workers).
CHUNK = 512

KEYS = (
    Key("key", "text", required=True),
    Key("distribution", "choice", required=True, choices=DISTRIBUTIONS),
    Key("low", "any"),
    Key("high", "any"),
    Key("mode", "any"),
    Key("sigma", "any"),
    Key("truncate", "number", low=0.5, high=10.0, what="a number of sigmas"),
    Key("group", "text"),
)

#: Which fields each distribution takes (required, optional).
FIELDS = {
    "uniform": (("low", "high"), ()),
    "triangular": (("low", "high"), ("mode",)),
    "normal": (("sigma",), ("truncate",)),
    "lognormal": (("sigma",), ("truncate",)),
}

#: The sections whose keys can carry a tolerance: the physical inputs (not the limit, the guard band or the span).
SECTIONS = ("clock", "current", "path", "rail")


@dataclass(frozen=True)
class Tolerance:
    """One uncertain key: its distribution in SI (dB for a gain), cut to ``support``.

    ``sigma`` is the standard deviation of the value (normal) or of its natural logarithm (lognormal);
    ``truncated`` is the probability mass the key's allowed range cut off (0 where it cut nothing).
    """

    key: str
    distribution: str
    nominal: float | None
    unit: str
    support: tuple[float, float]
    low: float | None = None
    high: float | None = None
    mode: float | None = None
    sigma: float | None = None
    truncate: float | None = None
    group: str | None = None
    truncated: float = 0.0

    def _dist(self):
        from scipy import stats

        if self.distribution == "uniform":
            return stats.uniform(loc=self.low, scale=self.high - self.low)
        if self.distribution == "triangular":
            return stats.triang((self.mode - self.low) / (self.high - self.low), loc=self.low,
                                scale=self.high - self.low)
        if self.distribution == "normal":
            return stats.norm(loc=self.nominal, scale=self.sigma)
        return stats.lognorm(self.sigma, scale=self.nominal)

    def quantile(self, u) -> np.ndarray:
        """The value at probability ``u`` (0..1) of the distribution truncated to ``support``."""
        dist = self._dist()
        lo, hi = dist.cdf(self.support[0]), dist.cdf(self.support[1])
        value = dist.ppf(lo + np.asarray(u, dtype=float) * (hi - lo))
        return np.clip(value, *self.support)

    def cdf(self, x) -> np.ndarray:
        """Probability of a draw at most ``x``."""
        dist = self._dist()
        lo, hi = dist.cdf(self.support[0]), dist.cdf(self.support[1])
        return np.clip((dist.cdf(np.asarray(x, dtype=float)) - lo) / (hi - lo), 0.0, 1.0)

    @property
    def label(self) -> str:
        from .parameters import key_label

        return key_label(self.key)

    def text(self) -> str:
        """``uniform 450 ps..800 ps``, ``normal sigma 6 dB (3 sigma)``: for the terminal."""
        q = lambda v: _quantity_text(v, self.unit)
        if self.distribution in ("uniform", "triangular"):
            body = f"{q(self.low)}..{q(self.high)}" + (f", mode {q(self.mode)}" if self.distribution == "triangular"
                                                      else "")
        elif self.distribution == "normal":
            body = f"mean {q(self.nominal)}, sigma {q(self.sigma)}, cut at {self.truncate:g} sigma"
        else:
            body = f"median {q(self.nominal)}, x{math.exp(self.sigma):.3g} per sigma, cut at {self.truncate:g} sigma"
        cut = f"; the allowed range cuts {self.truncated:.1%}" if self.truncated > 1e-4 else ""
        return f"{self.distribution} {body}{cut}"

    def as_json(self) -> dict:
        return dict(key=self.key, distribution=self.distribution, unit=self.unit, nominal=self.nominal,
                    low=self.low, high=self.high, mode=self.mode, sigma=self.sigma, truncate=self.truncate,
                    group=self.group, support=list(self.support), truncated=self.truncated)


def _quantity_text(value: float, unit: str) -> str:
    """A value as a board file would write it: SI prefixes, areas in cm2 (a prefix on m2 would square)."""
    if unit == "m2":
        return f"{value * 1e4:.4g} cm2"
    if unit in ("", "dB"):
        return f"{value:.4g} {unit}".strip()
    return format_quantity(value, unit)


def _allowed(declaration: Key) -> tuple[float, float]:
    """A key's allowed range in parameter units, open ends moved just inside."""
    if declaration.kind == "gain":
        return -300.0, 0.0
    lo = -math.inf if declaration.low is None else declaration.low
    hi = math.inf if declaration.high is None else declaration.high
    if declaration.low is not None and declaration.low_open:
        lo = lo + max(abs(lo), 1e-300) * 1e-9
    if declaration.high is not None and declaration.high_open:
        hi = hi - max(abs(hi), 1e-300) * 1e-9
    return lo, hi


def _entry(template: Template, index: int, table, seen: dict) -> Tolerance:
    file = template.file
    r = TableReader(file, f"tolerance[{index}]", table, KEYS)
    key, distribution = r.get("key"), r.get("distribution")
    required, optional = FIELDS[distribution]
    for name in ("low", "high", "mode", "sigma", "truncate"):
        if r.has(name) and name not in required + optional:
            users = [d for d, (req, opt) in FIELDS.items() if name in req + opt]
            raise r.error(name, f"not used by a {distribution} distribution (only by {' and '.join(users)})")
        if name in required and not r.has(name):
            raise r.error(name, f"missing; a {distribution} distribution needs {' and '.join(required)}")
    if not key.startswith(tuple(f"{s}[" for s in SECTIONS)):
        raise r.error("key", "only keys of clock, current, path and rail entries can carry a tolerance (the limit, "
                      "the guard band and the span are choices, not uncertain inputs)", key)
    if key in seen:
        raise r.error("key", f"already has a tolerance (tolerance[{seen[key]}]); one entry per key", key)
    seen[key] = index
    try:
        parameter = template.parameter(key)
    except BoardError as problem:
        raise r.error("key", problem.problem, key) from None
    declaration = parameter.declaration
    if declaration.kind == "count":
        raise r.error("key", "a count takes whole numbers; a tolerance needs a value that varies continuously", key)
    nominal = parameter.value
    if nominal is None and isinstance(declaration.default, (int, float)) and not isinstance(declaration.default, bool):
        nominal = float(declaration.default)
    unit = parameter.unit
    allowed = _allowed(declaration)

    def value(name: str) -> float:
        raw = r.table[name]
        parsed = _si_value(declaration, raw)
        if parsed is None or not math.isfinite(parsed):
            raise r.error(name, f"expected a value in the unit of {key} ({unit or 'a plain number'})", raw)
        return parsed

    def inside(name: str, v: float) -> None:
        if not allowed[0] <= v <= allowed[1]:
            raise r.error(name, f"outside the range {key} allows{declaration.range_text() or ': -300 to 0 dB'}",
                          r.table[name])

    low = high = mode = sigma = truncate = None
    if distribution in ("uniform", "triangular"):
        low, high = value("low"), value("high")
        inside("low", low)
        inside("high", high)
        if not low < high:
            raise r.error("high", f"must be above low ({format_quantity(low, unit)})", r.table["high"])
        support = (low, high)
        if distribution == "triangular":
            mode = value("mode") if r.has("mode") else nominal
            if mode is None or not low <= mode <= high:
                where = "mode" if r.has("mode") else "key"
                raise r.error(where, "the mode (default: the nominal value) must lie within low..high",
                              r.table.get("mode", nominal))
    else:
        if nominal is None:
            raise r.error("key", f"no number for it in the board file (missing, or taken from an IBIS model); a "
                          f"{distribution} distribution is centred on the nominal value, so write one there", key)
        raw = r.table["sigma"]
        relative = isinstance(raw, str) and raw.strip().endswith("%")
        if relative and declaration.kind == "ratio":
            raise r.error("sigma", f"{key} is itself a fraction, so a % would be ambiguous; give sigma as a "
                          "fraction (0.01 is one percentage point)", raw)
        if declaration.kind == "gain":
            if distribution == "lognormal":
                raise r.error("distribution", "a ratio in dB is already logarithmic; use normal with sigma in dB",
                              distribution)
            if relative or not (isinstance(raw, str) and raw.strip().endswith("dB")):
                raise r.error("sigma", "write sigma in dB, e.g. '6 dB'", raw)
            sigma = parse_quantity(raw, "decibel")
        elif relative:
            sigma = parse_quantity(raw, "ratio") * abs(nominal)
        else:
            sigma = value("sigma")
        if not sigma > 0:
            raise r.error("sigma", "must be above zero", raw)
        truncate = r.get("truncate") if r.has("truncate") else 3.0
        if distribution == "normal":
            ends = (nominal - truncate * sigma, nominal + truncate * sigma)
        else:
            if not nominal > 0:
                raise r.error("key", "a lognormal distribution needs a nominal value above zero", nominal)
            sigma = math.log1p(sigma / nominal)
            ends = (nominal * math.exp(-truncate * sigma), nominal * math.exp(truncate * sigma))
        support = (max(ends[0], allowed[0]), min(ends[1], allowed[1]))
        if not support[0] < support[1]:
            raise r.error("sigma", f"the distribution lies outside the range {key} allows{declaration.range_text()}",
                          raw)
    group = r.get("group")
    if group is not None and not NAME.fullmatch(group):
        raise r.error("group", "a group name may use letters, digits, '_' and '-' (up to 64)", group)
    tolerance = Tolerance(key, distribution, nominal, unit, support, low, high, mode, sigma, truncate, group)
    if distribution in ("normal", "lognormal"):
        full = Tolerance(key, distribution, nominal, unit, ends, sigma=sigma, truncate=truncate)
        cut = 1.0 - float(full.cdf(support[1]) - full.cdf(support[0]))
        tolerance = Tolerance(key, distribution, nominal, unit, support, low, high, mode, sigma, truncate, group, cut)
    _check_ends(template, index, tolerance)
    return tolerance


def _check_ends(template: Template, index: int, tolerance: Tolerance) -> None:
    """A board at either end of the tolerance must be valid (a range that depends on another key, such as a
    rise time that must fit the period, is checked there)."""
    for end, v in zip(("low", "high"), tolerance.support):
        try:
            template.board_at({tolerance.key: v})
        except BoardError as problem:
            field = end if tolerance.distribution in ("uniform", "triangular") else "sigma"
            raise BoardError(template.file, f"tolerance[{index}].{field}",
                             f"at {tolerance.key} = {_quantity_text(v, tolerance.unit)} the board is not valid: "
                             f"{problem.key}: {problem.problem}") from None


def read_tolerances(template: Template) -> tuple[Tolerance, ...]:
    """The board's ``[[tolerance]]`` entries, checked (empty where it has none).

    Raises
    ------
    BoardError
        One line naming ``tolerance[i].field``: an unknown or non-numeric key, a wrong unit, low above high, a
        sigma not above zero, a distribution outside the key's allowed range, a board that is not valid at
        the ends of a distribution.
    """
    entries = template.data.get("tolerance", [])
    if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
        raise BoardError(template.file, "tolerance", "expected an array of tables, written [[tolerance]]")
    seen: dict[str, int] = {}
    return tuple(_entry(template, i, table, seen) for i, table in enumerate(entries))


def units_of(tolerances) -> list[list[int]]:
    """The independent draws: each a list of the tolerances it sets (a group's entries share one)."""
    units: dict[object, list[int]] = {}
    for j, t in enumerate(tolerances):
        units.setdefault(t.group if t.group is not None else ("own", j), []).append(j)
    return list(units.values())


def draw_units(count: int, samples: int, seed: int, chunk: int = CHUNK) -> np.ndarray:
    """Uniform draws (samples x count), chunk by chunk from the children of one SeedSequence."""
    chunks = -(-samples // chunk)
    out = np.empty((samples, count))
    for k, child in enumerate(np.random.SeedSequence(seed).spawn(chunks)):
        size = min(chunk, samples - k * chunk)
        out[k * chunk:k * chunk + size] = np.random.default_rng(child).random((size, count))
    return out


def draw(tolerances, samples: int, seed: int) -> np.ndarray:
    """The tolerances' values of each sample (samples x tolerances), SI."""
    units = units_of(tolerances)
    u = draw_units(len(units), samples, seed)
    values = np.empty((samples, len(tolerances)))
    for g, members in enumerate(units):
        for j in members:
            values[:, j] = tolerances[j].quantile(u[:, g])
    return values
