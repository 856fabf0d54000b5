"""The pre-compliance test plan: which frequencies to measure first, with band, RBW, detectors and expectations."""

from __future__ import annotations

import numpy as np

from .pipeline import Estimate, antenna_cables
from .receiver import band_names, resolution_bandwidth_hz

__all__ = ["PLAN_COLUMNS", "plan_rows", "cable_resonances", "resonance_lines"]

#: A harmonic this close (relative) to an antenna cable's series resonance is said to sit on it: the current there
#: is within about 1 dB of its peak for the resonances' Q of 5 to 10 (common practice, no source).
NEAR_RESONANCE = 0.03


PLAN_COLUMNS = ("priority", "source", "harmonic", "frequency_hz", "band_lo_hz", "band_hi_hz", "cispr_band", "rbw_hz",
                "detectors", "detector", "expected", "limit", "margin_db", "path", "note")


def plan_rows(est: Estimate, everything: bool = False, top: int = 0) -> list[dict]:
    """The frequencies to measure first, worst margin first.

    Rows over the limit or inside the guard band; every row with ``everything``; and where none is near the
    limit, the ``top`` closest (so a plan for a passing board still says where to look).
    """
    r = est.rows
    detectors = est.board.limit.detectors
    finite = np.isfinite(r.worst_margin_db)
    keep = np.ones(len(r), bool) if everything else (r.flags["over-limit"] | r.flags["within-guard-band"])
    keep &= finite
    if not keep.any() and top:
        keep = finite & (np.cumsum(finite) <= top)  # rows are sorted worst first
    bands = band_names(r.frequency_hz)
    rbw = resolution_bandwidth_hz(r.frequency_hz)
    resonances = cable_resonances(est)
    out = []
    for priority, i in enumerate(np.flatnonzero(keep), start=1):
        det = r.worst_detector[i]
        present = [d for d in detectors if np.isfinite(r.limits[d][i])]
        notes = []
        if r.spread[i]:
            notes.append(f"spread band {r.band_lo_hz[i] / 1e6:.6g}-{r.band_hi_hz[i] / 1e6:.6g} MHz: peak scan "
                         f"across it at {rbw[i] / 1e3:g} kHz RBW, then {'/'.join(present)} at the maximum")
        elif "QP" in present:
            notes.append("peak prescan, then QP on the line")
        flags = r.flag_list(i)
        overlaps = [f.split(":", 1)[1] for f in flags if f.startswith("overlaps:")]
        if overlaps:
            notes.append(f"shares the RBW with {', '.join(overlaps)}: switch sources off to tell them apart")
        if "decoupling-insufficient" in flags:
            notes.append("rail current escapes the decoupling")
        cables = r.cable_current_dbua
        for cable in est.source_paths[str(r.source[i])]:
            if cable in cables and np.isfinite(cables[cable][i]):
                notes.append(f"current probe on {cable} at its connector (the cable's base): expect "
                             f"{cables[cable][i]:.1f} dBuA common mode")
        for cable, hz in resonances.items():
            if cable in est.source_paths[str(r.source[i])] and hz.size:
                nearest = hz[np.argmin(np.abs(hz - r.frequency_hz[i]))]
                if abs(nearest / r.frequency_hz[i] - 1) <= NEAR_RESONANCE:
                    notes.append(f"on {cable}'s series resonance at {nearest / 1e6:.4g} MHz: its common-mode "
                                 "current peaks here (a ferrite damps it; another length moves it)")
        if "near-anti-resonance" in flags:
            notes.append("decoupling near an anti-resonance: within the part tolerances it may not hold")
        if "near-field" in flags:
            notes.append("near field at this distance: estimate less certain")
        out.append({
            "priority": priority,
            "source": str(r.source[i]),
            "harmonic": int(r.harmonic[i]),
            "frequency_hz": float(r.frequency_hz[i]),
            "band_lo_hz": float(r.band_lo_hz[i]),
            "band_hi_hz": float(r.band_hi_hz[i]),
            "cispr_band": str(bands[i]),
            "rbw_hz": float(rbw[i]),
            "detectors": "/".join(present),
            "expected": float(r.readings[det][i]),
            "limit": float(r.limits[det][i]),
            "margin_db": float(r.worst_margin_db[i]),
            "detector": str(det),
            "path": None if r.dominant_path[i] is None else str(r.dominant_path[i]),
            "note": "; ".join(notes),
        })
    return out


def cable_resonances(est: Estimate) -> dict[str, np.ndarray]:
    """Each antenna cable's series resonances in the analysed span [Hz]."""
    lo, hi = est.span_hz
    return {name: est.board.paths[name].resonances_hz(lo, hi) for name in antenna_cables(est.board)}


def resonance_lines(est: Estimate) -> list[str]:
    """One line per antenna cable naming its series resonances in the span (where to look with a current probe
    and the antenna first)."""
    out = []
    for name, hz in cable_resonances(est).items():
        listed = ", ".join(f"{f / 1e6:.4g}" for f in hz) or "none"
        out.append(f"cable {name} ({est.board.paths[name].length_m:g} m) resonates at {listed} MHz: its "
                   "common-mode current peaks there; probe it at the connector")
    return out
