"""Benchmark (not collected by pytest): python tests/perf/bench.py

Goals from the foundation issue on the 2-core reference machine:
10^6 harmonics in under 50 ms; `estimate` of an 8-clock board to 6 GHz in under 1 s.
"""

from __future__ import annotations

import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from emispec.board import load_board
from emispec.margin import estimate
from emispec.report import json_text
from emispec.waveform import Trapezoid, harmonic_amplitudes

BOARD = """\
title = "Benchmark board: 8 clocks to 6 GHz"
guard_band = "6 dB"
limit = "cispr32-class-b-radiated-3m"   # the 1.2 GHz clock takes the CISPR 32 span to 6 GHz
{clocks}
[[path]]
name = "loop"
kind = "loop"
area = "0.5 cm2"

[[path]]
name = "cable"
kind = "cable"
length = "2 m"
ratio = "-60 dB"

[[path]]
name = "probe"
kind = "transfer"
input = "voltage"
gain = [["30 MHz", -90.0], ["300 MHz", -70.0], ["6 GHz", -75.0]]
"""

CLOCK = """
[[clock]]
name = "clk{k}"
frequency = "{f} MHz"
rise_time = "{tr} ns"
fall_time = "{tf} ns"
duty_cycle = "{d} %"
swing = "3.3 V"
load = {{ resistance = "33 ohm", capacitance = "8 pF" }}
paths = ["loop", "cable", "probe"]
"""


def best_of(action, repeats: int) -> tuple[float, float]:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        action()
        times.append(time.perf_counter() - start)
    return min(times), statistics.median(times)


def main() -> None:
    wave = Trapezoid(10e6, 3.3, 0.45, 1.1e-9, 1.3e-9)
    n = np.arange(1, 1_000_001)
    best, median = best_of(lambda: harmonic_amplitudes(wave, n), 7)
    print(f"harmonic_amplitudes, 10^6 harmonics: best {best * 1e3:.1f} ms, median {median * 1e3:.1f} ms (goal < 50 ms)")

    freqs = [8, 12, 24, 25, 33.3, 48, 100, 1200]
    clocks = "".join(
        CLOCK.format(k=k, f=f, tr=tr, tf=1.2 * tr, d=45 + k)
        for k, (f, tr) in enumerate(zip(freqs, [3.0, 2.5, 2.0, 1.5, 1.2, 1.0, 0.5, 0.06]))
    )
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench.toml"
        path.write_text(BOARD.format(clocks=clocks), encoding="utf-8")
        result = estimate(load_board(path))
        best, median = best_of(lambda: estimate(load_board(path)), 7)
        print(f"load + estimate, 8 clocks, {len(result.rows)} harmonics to {result.span_hz[1] / 1e9:g} GHz: "
              f"best {best * 1e3:.1f} ms, median {median * 1e3:.1f} ms (goal < 1 s)")
        best, median = best_of(lambda: json_text(result), 3)
        print(f"JSON of those rows: best {best * 1e3:.1f} ms")
        command = [sys.executable, "-m", "emispec", "estimate", str(path), "--json", str(Path(tmp) / "r.json")]
        best, median = best_of(lambda: subprocess.run(command, check=True, capture_output=True), 3)
        print(f"whole command `emispec estimate --json` (with interpreter start and imports): best {best:.2f} s")
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"peak resident memory of this process: {peak_mb:.0f} MB")
    print(f"python {sys.version.split()[0]}, numpy {np.__version__}")


if __name__ == "__main__":
    main()
