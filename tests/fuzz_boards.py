"""A property-based fuzzer of board files: anything but a result or a board error is a failure.

Random boards (hypothesis) mix clean values with out-of-range numbers, wrong units, special values (NaN,
infinity, huge integers, empty strings, booleans) and broken structure.  Each board is written as TOML, loaded,
estimated and put through every writer (JSON, CSV, Markdown, the swept spectrum, the test plan, HTML without
plots; ``--plots`` adds the PNGs).  Outcomes: ``result``, ``board error`` (one clear line, exit 2), ``crash``
(anything else), ``slow`` (a result that took longer than the time goal: the budget should have refused it).

Run as a script for the totals (``python tests/fuzz_boards.py --examples 10000``); ``tests/test_fuzz.py`` runs a
small budget in CI.  The script caps its own memory (RLIMIT_AS), so a runaway allocation shows as a crash.
"""

from __future__ import annotations

import argparse
import json
import math
import resource
import sys
import tempfile
import time
import traceback
from collections import Counter
from pathlib import Path

from hypothesis import HealthCheck, given, settings
from hypothesis import seed as fixed_seed
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

TIME_GOAL_S = 2.0

# ---------------------------------------------------------------- values


def quantity(unit: str, lo: float, hi: float, clean: bool = False):
    """A quantity string in the unit; unless ``clean``, sometimes one of the ways users get it wrong."""
    good = st.floats(lo, hi, allow_nan=False, allow_infinity=False).map(lambda x: f"{x:.6g} {unit}")
    if clean:
        return good
    wrong = st.sampled_from(["16", "1e300 " + unit, "1e-300 " + unit, "-1 " + unit, "0 " + unit, "nan",
                             "3 MHz", "2 ns", "5 V", "1 ohm", "", " ", "abc", "1e400 " + unit, "\uff11 " + unit,
                             "2500000000 c" + unit])
    special = st.sampled_from([float("nan"), float("inf"), -0.0, 1e308, 10**40, True, 0, -5, [], {}])
    return st.one_of(good, good, good, wrong, special)


def choice(clean: bool, good: list, bad: list):
    return st.sampled_from(good if clean else good + bad)


def name(clean: bool):
    good = st.sampled_from(["a", "b", "c", "clk_1", "x-2"])
    return good if clean else st.one_of(good, st.text(alphabet="abcdefghij_-/.$ \n", min_size=0, max_size=8))


@st.composite
def spread(draw, clean):
    table = {"mode": draw(choice(clean, ["down", "centre", "center", "up"], ["middle"])),
             "deviation": draw(quantity("%", 0.05, 5, clean)),
             "rate": draw(st.one_of(quantity("kHz", 5, 60, clean),
                                    st.sampled_from(["1 kHz", "2 kHz"] if clean else ["100 Hz", "1 Hz", "1 MHz"])))}
    if draw(st.booleans()):
        table["profile"] = draw(choice(clean, ["triangle", "sine", "skew-cubic"], ["kiss"]))
    return table


@st.composite
def clock(draw, paths, rails, clean, loads):
    table = {"name": draw(name(clean)), "frequency": draw(quantity("MHz", 0.5, 300, clean)),
             "rise_time": draw(quantity("ns", 0.1, 2, clean)), "swing": draw(quantity("V", 0.5, 5, clean)),
             "paths": draw(st.lists(st.sampled_from(paths), min_size=1, max_size=3, unique=True)) if paths and clean
             else draw(st.lists(st.sampled_from(paths or ["none"]), min_size=0, max_size=3))}
    for key, value in (("fall_time", quantity("ns", 0.1, 2, clean)), ("duty_cycle", quantity("%", 30, 70, clean)),
                       ("edge", choice(clean, ["10-90", "20-80"], ["0-100", "5-95"])),
                       ("harmonics", choice(clean, ["envelope", "exact"], ["both"])),
                       ("edge_shape", choice(clean, ["linear", "rc", "gaussian"], ["square"])),
                       ("spread", spread(clean)), ("combine", st.sampled_from(["power", "coherent"])),
                       ("reference", st.sampled_from(["x", "y"]))):
        if draw(st.integers(0, 3)) == 0:
            table[key] = draw(value)
    if loads or draw(st.integers(0, 3)):
        table["load"] = draw(st.fixed_dictionaries({"resistance": quantity("ohm", 10, 200, clean)},
                                                   optional={"capacitance": quantity("pF", 1, 50, clean)}))
    if rails and draw(st.booleans()):
        table["rail"] = draw(st.sampled_from(rails if clean else rails + ["nope"]))
    return table


@st.composite
def path(draw, label, clean, measurement):
    kinds = ["loop", "cable", "transfer"] if measurement == "radiated" else ["conducted", "transfer"]
    kind = draw(choice(clean, kinds, ["slot", "loop", "conducted"]))
    table = {"name": label, "kind": kind}
    if kind == "loop":
        table["area"] = draw(quantity("cm2", 0.01, 10, clean))
    elif kind == "cable":
        table["length"] = draw(quantity("m", 0.1, 5, clean))
        antenna = draw(st.integers(0, 2)) == 0
        if antenna:
            table["model"] = draw(choice(clean, ["antenna"], ["dipole", "short"]))
            table["drive"] = "voltage" if clean else draw(st.sampled_from(["voltage", "table", "escape", "ratio"]))
            for key, value in (("diameter", quantity("mm", 0.5, 10, clean)),
                               ("geometry", choice(clean, ["monopole", "dipole"], ["helix"])),
                               ("return_inductance", quantity("nH", 0.1, 20, clean)),
                               ("ferrite", st.one_of(
                                   st.fixed_dictionaries({}, optional={"resistance": quantity("ohm", 0, 500, clean),
                                                                       "inductance": quantity("uH", 0, 5, clean)}),
                                   st.fixed_dictionaries({"impedance": st.lists(st.tuples(
                                       quantity("MHz", 1, 1000, clean), quantity("ohm", 1, 1000, clean)).map(list),
                                       min_size=1, max_size=3)})))):
                if draw(st.integers(0, 2)) == 0:
                    table[key] = draw(value)
        else:
            table["drive"] = "ratio" if clean else draw(st.sampled_from(["ratio", "escape"]))
        table["ratio"] = draw(st.one_of(quantity("dB", -90, -10, clean), st.floats(1e-6, 1 if clean else 2)))
    elif kind == "transfer":
        table["input"] = draw(choice(clean, ["voltage", "current"], ["escape", "power"]))
        gains = st.lists(st.tuples(quantity("MHz", 0.5, 300, clean),
                                   st.floats(-200, 100) if clean else st.one_of(st.floats(-200, 100), st.just(1e6))
                                   ).map(list), min_size=1 if clean else 0, max_size=4)
        table["gain"] = sorted(draw(gains), key=lambda p: float(p[0].split()[0])) if clean else draw(gains)
    if measurement == "radiated" and draw(st.integers(0, 4)) == 0:
        table["distance"] = draw(quantity("m", 0.1, 10, clean))
    if kind in ("loop", "cable") and draw(st.integers(0, 4)) == 0:
        table["ground_reflection"] = draw(choice(clean, [True, False, "auto"], ["yes", 1]))
    return table


@st.composite
def rail(draw, label, clean):
    parts = []
    for _ in range(draw(st.integers(1 if clean else 0, 3))):
        kind = draw(choice(clean, ["capacitor", "capacitor", "plane", "regulator"], ["package", "inductor"]))
        part = {"kind": kind}
        if kind == "capacitor":
            part.update(capacitance=draw(quantity("nF", 0.1, 10000, clean)), esr=draw(quantity("mohm", 1, 100, clean)),
                        esl=draw(quantity("nH", 0.1, 3, clean)))
            if draw(st.booleans()):
                part["count"] = draw(st.integers(1, 20) if clean else st.one_of(st.integers(-1, 20), st.just(10**30)))
        elif kind == "plane":
            part.update(area=draw(quantity("cm2", 1, 100, clean)), separation=draw(quantity("mm", 0.05, 1, clean)),
                        permittivity=draw(st.floats(1, 10) if clean else st.one_of(st.floats(1, 10), st.just("high"))))
            if draw(st.booleans()):
                part["loss_tangent"] = draw(st.floats(0, 0.1 if clean else 0.5))
        elif kind == "regulator":
            part.update(resistance=draw(quantity("mohm", 1, 100, clean)), inductance=draw(quantity("nH", 1, 100, clean)))
        elif kind == "package":
            part.update(inductance=draw(quantity("nH", 0.1, 3, clean)),
                        die_capacitance=draw(quantity("nF", 0.1, 10, clean)))
        parts.append(part)
    if clean and draw(st.booleans()):
        parts.append({"kind": "package", "inductance": draw(quantity("nH", 0.1, 3, True)),
                      "die_capacitance": draw(quantity("nF", 0.1, 10, True))})
    table = {"name": label, "voltage": draw(quantity("V", 0.8, 5, clean)), "part": parts}
    if draw(st.booleans()):
        table["supply_path"] = {"inductance": draw(quantity("nH", 1, 50, clean))}
    if draw(st.integers(0, 3)) == 0:
        table["target_impedance"] = draw(quantity("ohm", 0.01, 1, clean))
    return table


@st.composite
def boards(draw):
    """Half of them clean (every value plausible), half with mistakes in them."""
    clean = draw(st.booleans())
    limits = ["cispr32-class-b-radiated-3m", "cispr32-class-b-radiated-10m", "cispr32-class-b-conducted-mains",
              "fcc15-class-b-radiated-3m", "fcc15-class-b-conducted"]
    limit = draw(choice(clean, limits, ["nope"]))
    measurement = "conducted" if "conducted" in limit else "radiated"
    path_names = [f"p{k}" for k in range(draw(st.integers(1 if clean else 0, 3)))]
    rail_names = [f"r{k}" for k in range(draw(st.integers(0, 2)))]
    paths = [draw(path(n, clean, measurement)) for n in path_names]
    needs_load = any(p["kind"] in ("loop", "cable", "conducted") or p.get("input") == "current" for p in paths)
    if clean and measurement == "conducted" and not rail_names:
        rail_names = ["r0"]
    rails = [draw(rail(n, clean)) for n in rail_names]
    clocks = []
    for k in range(draw(st.integers(1 if clean else 0, 3))):
        entry = draw(clock(path_names, rail_names, clean, needs_load))
        if clean:
            entry["name"] = f"clk{k}"
            if measurement == "conducted":
                entry["rail"] = rail_names[0]
        clocks.append(entry)
    board = {"title": draw(st.just("fuzz") if clean else st.one_of(st.just("fuzz"), name(False))), "limit": limit,
             "path": paths, "rail": rails, "clock": clocks}
    if draw(st.integers(0, 3)) == 0:
        board["guard_band"] = draw(quantity("dB", 0, 10, clean))
    if draw(st.integers(0, 4)) == 0:
        board["max_frequency"] = draw(quantity("MHz", 100, 3000, clean))
    if rail_names and draw(st.booleans()):
        board["current"] = [{"name": "core", "frequency": draw(quantity("MHz", 0.5, 300, clean)),
                             "peak": draw(quantity("A", 0.01, 2, clean)), "width": draw(quantity("ns", 0.1, 1, clean)),
                             "rail": rail_names[0], "paths": path_names[:1],
                             "per": draw(st.sampled_from(["cycle", "edge"]))}]
    return board


# ---------------------------------------------------------------- a tiny TOML writer (tomllib only reads)


def toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf") if math.isinf(value) else repr(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in value.items()) + "}"


def toml_text(board: dict) -> str:
    lines = [f"{json.dumps(k)} = {toml_value(v)}" for k, v in board.items() if not isinstance(v, list)
             or not v or not all(isinstance(x, dict) for x in v)]
    for section, entries in board.items():
        if isinstance(entries, list) and entries and all(isinstance(x, dict) for x in entries):
            for entry in entries:
                lines.append(f"\n[[{section}]]")
                lines += [f"{json.dumps(k)} = {toml_value(v)}" for k, v in entry.items()
                          if not (k == "part" and isinstance(v, list))]
                for part in entry.get("part", []) if isinstance(entry.get("part"), list) else []:
                    lines.append(f"[[{section}.part]]")
                    lines += [f"{json.dumps(k)} = {toml_value(v)}" for k, v in part.items()]
    return "\n".join(lines) + "\n"


# ---------------------------------------------------------------- one board


def run_one(text: str, folder: Path, plots: bool = False) -> tuple[str, float, str]:
    """(outcome, seconds, detail) for one board file's text."""
    from emispec.board import load_board
    from emispec.errors import InputError
    from emispec.pipeline import estimate
    from emispec.plan import plan_rows
    from emispec.report import csv_text, html_text, json_text, markdown_text, plan_csv_text, plan_markdown_text
    from emispec.report import output_files, swept_csv_text, views_of

    path = folder / "board.toml"
    path.write_text(text, encoding="utf-8")
    start = time.perf_counter()
    try:
        result = estimate(load_board(path))
        views = views_of(result)
        plan = plan_rows(result, top=10)
        for text_out in (json_text(result), csv_text(result), markdown_text(result), swept_csv_text(result, views.swept),
                         plan_csv_text(result, plan), plan_markdown_text(result, plan)):
            assert isinstance(text_out, str) and "NaN" not in text_out and "Infinity" not in text_out
        if plots:
            html_text(result, plan, views=views)
            for render in output_files(result, views=views).values():
                render()
        elapsed = time.perf_counter() - start
        return ("slow" if elapsed > TIME_GOAL_S else "result"), elapsed, ""
    except InputError as err:
        message = str(err)
        if "\n" in message:
            return "crash", time.perf_counter() - start, f"a board error of more than one line: {message!r}"
        return "board error", time.perf_counter() - start, message
    except Exception:  # noqa: BLE001 - every other exception is what the fuzzer looks for
        return "crash", time.perf_counter() - start, traceback.format_exc(limit=6)


def fuzz(examples: int, seed: int, plots: bool = False, report=print) -> Counter:
    totals: Counter = Counter()
    slowest = [0.0, ""]
    crashes: list[str] = []

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)

        @fixed_seed(seed)  # the same seed, the same boards
        @settings(max_examples=examples, database=None, deadline=None, suppress_health_check=list(HealthCheck),
                  print_blob=False)
        @given(board=boards())
        def one(board):
            outcome, seconds, detail = run_one(toml_text(board), folder, plots)
            totals[outcome] += 1
            if outcome != "board error" and seconds > slowest[0]:
                slowest[:] = [seconds, toml_text(board)]
            if outcome in ("crash", "slow"):
                crashes.append(f"{outcome} ({seconds:.2f} s): {detail}\n{toml_text(board)}")

        one()
    totals["slowest_ms"] = int(slowest[0] * 1000)
    for crash in crashes[:5]:
        report(crash)
    return totals


def main() -> int:
    global TIME_GOAL_S
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--examples", type=int, default=10_000)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--plots", action="store_true", help="also render every PNG and the HTML report")
    parser.add_argument("--memory-gb", type=float, default=2.0, help="address-space cap for this process")
    parser.add_argument("--time-goal", type=float, default=2.0,
                        help="seconds a board may take before it counts as slow (default: the budget's 2 s)")
    args = parser.parse_args()
    TIME_GOAL_S = args.time_goal
    cap = int(args.memory_gb * 2**30)
    resource.setrlimit(resource.RLIMIT_AS, (cap, cap))
    start = time.perf_counter()
    totals = fuzz(args.examples, args.seed, args.plots)
    boards_run = sum(v for k, v in totals.items() if k != "slowest_ms")
    print(f"{boards_run} boards in {time.perf_counter() - start:.0f} s: " + ", ".join(
        f"{k} {v}" for k, v in sorted(totals.items()) if k != "slowest_ms")
          + f"; slowest board that was not refused: {totals['slowest_ms']} ms")
    return 0 if totals["crash"] == 0 and totals["slow"] == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
