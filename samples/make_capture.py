"""Invented demo data: a scope capture of the beehive gateway's sdram_clk on the rev A prototype.

100 MHz, 48 % duty, 0.42 ns / 0.5 ns edges (10-90), 3.3 V, with the ringing of its unterminated stub (about
1.1 GHz, decaying in 0.6 ns), sampled at 20 GS/s with 8-bit resolution and some noise.

Run: python samples/make_capture.py
"""
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
period, duty, swing = 10e-9, 0.48, 3.3
rise, fall = 0.42e-9 / 0.8, 0.5e-9 / 0.8  # 0-100 % ramps
dt, count = 50e-12, 20000  # 20 GS/s, 1 us
rng = np.random.default_rng(2026)
t = np.arange(count) * dt
phase = np.mod(t + rng.uniform(0, period) + period / 4, period) - period / 4
high = np.clip((phase + rise / 2) / rise, 0, 1) - np.clip((phase - duty * period + fall / 2) / fall, 0, 1)
after = phase - rise / 2
ring = np.where(after > 0, 0.35 * np.exp(-after / 0.6e-9) * np.sin(2 * np.pi * 1.1e9 * after), 0.0)
v = swing * high + ring + rng.normal(0, 0.015, count)
step = 5.0 / 256  # 8 bits over a 5 V screen
v = np.round(v / step) * step
with open(HERE / "sdram-clk-capture.csv", "w", encoding="utf-8") as fh:
    fh.write("Model,example oscilloscope\nSample interval,50 ps\nProbe,10:1 passive\n\nTime (ns),CH2 (V)\n")
    fh.writelines(f"{a * 1e9:.3f},{b:.4f}\n" for a, b in zip(t, v))
