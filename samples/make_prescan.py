"""Invented demo data: a pre-compliance scan of the beehive gateway's rev A prototype (emispec's own receiver on a
'true' board, plus a noisy floor and two ambient carriers).

Run: python samples/make_prescan.py
"""
from pathlib import Path

import numpy as np

import emispec
from emispec.pipeline import board_lines, readings_at

HERE = Path(__file__).resolve().parent
# the invented prototype's "true" coupling, which `emispec fit` should find again
t = emispec.Template.load(str(HERE / "beehive-gateway.toml"))
true = t.board_at({"path[ethernet_cable].ratio": -79.0, "path[dc_cable].ratio": -49.0, "path[sdram_loop].area": 0.36e-4})
f = np.arange(30e6, 1000e6 + 1, 50e3)
r = readings_at(true, board_lines(true), f, ("PK", "AV"))
rng = np.random.default_rng(2026)
floor = 18 + rng.normal(0, 1.2, f.size)
def carrier(fc, level):
    return level + 20 * np.log10(np.exp(-((f - fc) ** 2) / (2 * (120e3 / 2.3548) ** 2)) + 1e-15)
amb = [carrier(94.6e6, 52.0), carrier(162.4e6, 41.0)]  # an FM broadcaster and a nearby land-mobile repeater
def total(x, extra):
    p = 10 ** (np.nan_to_num(x, nan=-300) / 10) + 10 ** (floor / 10) + sum(10 ** (a / 10) for a in extra)
    return 10 * np.log10(p)
pk, av = total(r["PK"].level_db, amb), total(r["AV"].level_db, amb)
with open(HERE / "beehive-prescan.csv", "w", encoding="utf-8") as fh:
    fh.write("# Invented demo data: pre-compliance scan of the beehive gateway rev A prototype (3 m, open area)\n")
    fh.write("Receiver;example EMI receiver\nDate;2026-11-27\nRBW;120 kHz\nStep;50 kHz\nDistance;3 m\n\n")
    fh.write("Frequency [MHz];PK [dBuV/m];AV [dBuV/m]\n")
    for a, b, c in zip(f, pk, av):
        fh.write(f"{a / 1e6:.3f};{b:.2f};{c:.2f}\n".replace(".", ","))
