"""Measured scans: readers for the instrument dialects, matching, and the fit of coupling factors.

The synthetic scans are made here, independently of emispec's frequency-domain receiver: the harmonics of
Paul's trapezoid series carried by the published loop and cable formulas, read by the brute-force time-domain
receiver of tests/bruteforce.py, plus a noisy floor and two ambient carriers.
"""

import json
import math

import numpy as np
import pytest
from typer.testing import CliRunner

from bruteforce import peak_and_average
from emispec.cli import app
from emispec.limits import load_limit
from emispec.parameters import Template
from emispec.pipeline import estimate
from emispec.readers import FileError, read_scan
from emispec.scan import DBM_TO_DBUV, ScanError, compare, fit, prepare
from emispec.trace import Trace

BOARD = """\
# a prototype to calibrate: two clocks, one on a loop, one (spread) on a cable
title = "Calibration board"
guard_band = "3 dB"
limit = "cispr32-class-b-radiated-3m"
harmonics = "exact"

[[clock]]
name = "a"
frequency = "33 MHz"
duty_cycle = "45 %"
rise_time = "2 ns"
edge = "0-100"
swing = "3.3 V"
load = { resistance = "50 ohm" }
paths = ["loop"]

[[clock]]
name = "b"
frequency = "48 MHz"
duty_cycle = "47 %"
rise_time = "1.5 ns"
edge = "0-100"
swing = "3.3 V"
load = { resistance = "50 ohm" }
spread = { mode = "down", deviation = "0.5 %", rate = "32 kHz", profile = "triangle" }
paths = ["cable"]

[[path]]
name = "loop"
kind = "loop"
area = "1 cm2"        # a guess before the scan

[[path]]
name = "cable"
kind = "cable"
length = "1 m"
drive = "ratio"
ratio = "-50 dB"      # a guess before the scan
"""

TRUE_AREA_M2, TRUE_RATIO_DB = 2.5e-4, -62.0
AMBIENT = ((98.3e6, 45.0), (433.92e6, 38.0))  # (frequency, dBuV/m): carriers no modelled source makes
FLOOR_DB = 12.0
RBW = 120e3  # CISPR 16-1-1 band C/D


def trapezoid_rms(n, f0, duty, ramp_s, swing=3.3):
    # Source: Paul, Introduction to EMC, 2nd ed., sec. 3.2: c_n = 2 A D sinc(n pi D) sinc(n pi tr / T), RMS / sqrt 2
    x, y = n * np.pi * duty, n * np.pi * ramp_s * f0
    return 2 * swing * duty * np.abs(np.sin(x) / x * np.sin(y) / y) / np.sqrt(2)


def true_field(clock, n):
    """RMS field [V/m] at 3 m of harmonic n of clock a (loop) or b (cable), from the published formulas."""
    if clock == "a":
        f = n * 33e6
        current = trapezoid_rms(n, 33e6, 0.45, 2e-9) / 50.0
        # Source: Paul (2006) sec. 8.1.2, |E| = 1.316e-14 f^2 A I / r, doubled by the ground reflection (Ott ch. 12)
        return 2 * 1.316e-14 * f**2 * TRUE_AREA_M2 * current / 3.0
    f = n * 48e6 * (1 - 0.0025)  # the down spread's centre
    current = trapezoid_rms(n, 48e6, 0.47, 1.5e-9) / 50.0 * 10 ** (TRUE_RATIO_DB / 20)
    # Source: Ott (2009) ch. 12, |E| = 1.257e-6 f L I / r with the reflection, L at most half a wavelength
    return 1.257e-6 * f * min(1.0, 299792458 / (2 * f)) * current / 3.0


def synthetic_scan(step_hz=30e3, lo=30e6, hi=1000e6, seed=3):
    """Frequencies and PK levels [dBuV/m] of a scan: the brute-force receiver near every harmonic, a floor
    drawn about FLOOR_DB, and the ambient carriers, all added in power."""
    f = np.arange(lo, hi, step_hz)
    power = 10 ** ((FLOOR_DB + np.random.default_rng(seed).normal(0, 1.0, f.size)) / 10)
    lines = [("a", n, 33e6, 0.0) for n in range(1, int(hi / 33e6) + 1)]
    lines += [("b", n, 48e6, 0.005) for n in range(1, int(hi / 48e6) + 1)]
    for clock, n, f0, dev in lines:
        amplitude = true_field(clock, n) / 1e-6  # uV/m
        centre = 1 - dev / 2
        near = np.flatnonzero(np.abs(f - n * f0 * centre) <= n * f0 * dev / 2 + 3 * RBW)
        for k in near:
            pk, _ = peak_and_average(n, f0, max(dev, 1e-12), 32e3, centre, f[k], RBW, periods=2)
            power[k] += (amplitude * pk) ** 2
    for fc, level in AMBIENT:
        near = np.flatnonzero(np.abs(f - fc) <= 3 * RBW)
        for k in near:
            pk, _ = peak_and_average(1, fc, 1e-12, 32e3, 1.0, f[k], RBW, periods=2)
            power[k] += (10 ** (level / 20) * pk) ** 2
    return f, 10 * np.log10(power)


@pytest.fixture(scope="module")
def scanned(tmp_path_factory):
    folder = tmp_path_factory.mktemp("scan")
    board = folder / "board.toml"
    board.write_text(BOARD)
    f, level = synthetic_scan()
    scan = folder / "scan.csv"
    lines = ["Instrument;Example receiver", "Date;2026-12-03", "RBW;120 kHz", "Detector;PK", "",
             "Frequency [MHz];Level PK [dBµV/m]"]
    lines += [f"{a / 1e6:.4f};{b:.3f}".replace(".", ",") for a, b in zip(f, level)]
    scan.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return board, scan


def test_fit_recovers_the_true_coupling_and_finds_the_ambient(scanned):
    # Source: the synthetic scan above (Paul's series, the loop and cable formulas, the brute-force receiver);
    # the goal: the true factors within 0.5 dB
    board, path = scanned
    template = Template.load(board)
    nominal = estimate(template.nominal)
    scan = prepare(read_scan(path), template.nominal.limit)
    c = compare(nominal, scan)
    assert sorted(np.round(c.unexplained_hz / 1e6, 1)) == [98.3, 433.9]  # the ambient carriers, nothing else
    assert set(c.source) == {"a", "b"} and c.peak_hz.size >= 30
    # the cable's guess overstates it by 12 dB: harmonics it puts over the floor that are truly under it
    assert c.not_seen_hz.size > 0 and set(c.not_seen_source) == {"b"}
    for n in c.not_seen_harmonic:  # what the receiver truly reads of them stays within the floor's spread
        pk, _ = peak_and_average(n, 48e6, 0.005, 32e3, 1 - 0.0025, n * 48e6 * (1 - 0.0025), RBW, periods=2)
        assert 20 * math.log10(true_field("b", n) * pk / 1e-6) < FLOOR_DB + 6
    result = fit(template, scan, ["path[loop].area", "path[cable].ratio"], nominal)
    area, ratio = result.fitted
    assert abs(20 * math.log10(area / TRUE_AREA_M2)) < 0.5
    assert abs(ratio - TRUE_RATIO_DB) < 0.5
    assert np.all(np.isfinite(result.stderr)) and np.all(result.stderr > 0)
    assert np.sqrt(np.mean(result.after_difference_db**2)) < 0.5 < np.sqrt(np.mean(c.difference_db**2))
    # each key is constrained by its own clock's peaks (a peak where both clocks read counts a little for both)
    for j, own in enumerate(("a", "b")):
        share = sum(w for i, w in zip(result.constraining[j], result.shares[j]) if c.source[i] == own)
        assert share > 0.9


def test_compare_and_fit_commands(scanned, tmp_path):
    board, path = scanned
    runner = CliRunner()
    result = runner.invoke(app, ["compare", str(board), str(path), "--json", "-"])
    assert result.exit_code == 0, result.output
    s = json.loads(result.stdout)
    assert s["schema"] == "emispec.compare/1"
    assert {"matches", "unexplained", "not_seen", "residual_db"} <= set(s)
    assert set(s["residual_db"]) == {"median", "rms"} and s["matches"][0]["detector"] == "PK"
    result = runner.invoke(app, ["compare", str(board), str(path), "--out", str(tmp_path / "cmp")])
    assert result.exit_code == 0, result.output
    import pandas  # a real CSV client reads the peak table with no options

    peaks = pandas.read_csv(tmp_path / "cmp" / "compare-peaks.csv")
    assert set(peaks["kind"]) == {"matched", "unexplained", "not-seen"}
    assert (peaks["kind"] == "matched").sum() == len(s["matches"]) and "measured_dbuv_m" in peaks.columns
    out = tmp_path / "fit"
    result = runner.invoke(app, ["fit", str(board), str(path), "--free", "path[loop].area", "--free",
                                 "path[cable].ratio", "--json", "-", "--out", str(out)])
    assert result.exit_code == 0, result.output
    s = json.loads(result.stdout)
    assert s["schema"] == "emispec.fit/1"
    p = s["parameters"]["path[cable].ratio"]
    assert p["unit"] == "dB" and p["nominal"] == -50.0 and abs(p["fitted"] - TRUE_RATIO_DB) < 0.5
    assert s["parameters"]["path[loop].area"]["unit"] == "m2"
    assert s["residual_db"]["after"]["rms"] < s["residual_db"]["before"]["rms"]
    assert {"matched", "unexplained"} <= set(s)
    # fitted.toml: the board as written, comments and layout kept, only the freed values changed
    before, after = BOARD.splitlines(), (out / "fitted.toml").read_text().splitlines()
    changed = [(a, b) for a, b in zip(before, after) if a != b]
    assert len(before) == len(after) and len(changed) == 2
    assert changed[0][1].startswith('area = "2.') and changed[0][1].endswith("cm2\"        # a guess before the scan")
    assert changed[1][1].startswith('ratio = "-6') and "# a guess before the scan" in changed[1][1]
    assert sorted(x.name for x in out.iterdir()) == ["fit.json", "fit.png", "fitted.toml"]
    refit = Template.load(out / "fitted.toml").parameter("path[cable].ratio").value
    assert refit == pytest.approx(p["fitted"], abs=0.01)
    report = tmp_path / "r.html"
    result = runner.invoke(app, ["report", str(board), "--out", str(report), "--scan", str(path)])
    assert result.exit_code == 0, result.output
    assert "Measured scan" in report.read_text() and "unexplained" in report.read_text()


def test_fit_refuses_keys_the_scan_cannot_constrain(scanned):
    board, path = scanned
    result = CliRunner().invoke(app, ["fit", str(board), str(path), "--free", "clock[a].spread.deviation"])
    assert result.exit_code == 2 and len(result.stderr.strip().splitlines()) == 1 and "no value" in result.stderr
    t = Template.load(board)
    scan = prepare(read_scan(path), t.nominal.limit)
    with pytest.raises(ScanError, match="changes none of the"):
        fit(t, scan, ["guard_band"])


# ---------------------------------------------------------------- readers: one file per dialect


def test_semicolon_decimal_comma_with_a_metadata_block(tmp_path):
    path = tmp_path / "a.csv"
    path.write_text("Type;Receiver\nStart;30 MHz\n# a comment\nDistance;3 m\n\n"
                    "Frequency [MHz];QP [dBµV/m];AV [dBµV/m]\n30,000;20,5;15,25\n30,060;21,0;16,0\n")
    data = read_scan(path)
    assert data.unit == "dBuV/m" and set(data.levels) == {"QP", "AV"}
    assert data.frequency_hz[1] == pytest.approx(30.06e6) and data.levels["AV"][0] == pytest.approx(15.25)
    assert data.metadata["distance"] == "3 m" and data.metadata["start"] == "30 MHz"


def test_tab_separated_named_detectors_and_khz(tmp_path):
    path = tmp_path / "b.tsv"
    path.write_text("freq (kHz)\tPeak (dBuV)\tQuasi-Peak (dBuV)\tAverage (dBuV)\n150\t60.5\t55.0\t48.0\n"
                    "160\t61\t56\t47\n")
    data = read_scan(path)
    assert data.unit == "dBuV" and list(data.levels) == ["PK", "QP", "AV"]
    assert data.frequency_hz.tolist() == [150e3, 160e3]


def test_no_header_in_hz_or_a_stated_unit(tmp_path):
    path = tmp_path / "c.csv"
    path.write_text("30000000,20.0\n31000000,22.5\n")
    data = read_scan(path, unit="dBuV/m")
    assert data.frequency_hz.tolist() == [30e6, 31e6] and list(data.levels) == ["PK"]
    path.write_text("30,20.0\n31,22.5\n")
    assert read_scan(path, unit="dBuV/m", frequency_unit="MHz", detector="AV").levels["AV"][1] == 22.5
    with pytest.raises(FileError, match="no level unit"):
        read_scan(path)


@pytest.mark.parametrize("text, words", [
    ("", "no rows of numbers"),
    ("Frequency [Hz];PK [dBuV/m]\n30e6\n31e6\n", "line 2: one column"),
    ("Frequency [Hz];PK [dBuV/m]\n30e6;20\n31e6;n/a\n", "line 3: expected 2 numbers"),
    ("Frequency [Hz];PK [dBuV/m]\n30e6;20\n29e6;21\n", "line 3: frequency does not increase"),
    ("Frequency [THz];PK [dBuV/m]\n30;20\n31;21\n", "frequency unit 'thz'"),
    ("Frequency [Hz];Level 1 [dBuV/m];Level 2 [dBuV/m]\n30e6;20;21\n31e6;21;22\n", "name its detector"),
])
def test_bad_scans_are_one_line_errors(tmp_path, text, words):
    path = tmp_path / "bad.csv"
    path.write_text(text)
    with pytest.raises(FileError, match=words):
        read_scan(path)


def test_units_corrections_and_distance():
    limit = load_limit("cispr32-class-b-radiated-3m")
    f = np.array([30e6, 100e6, 1e9])

    class Data:
        frequency_hz, levels, metadata, file = f, {"PK": np.array([0.0, 0.0, 0.0])}, {}, "s.csv"
        unit = "dBm"

    with pytest.raises(ScanError, match="give the antenna factor"):
        prepare(Data, limit)
    # Source: P = V^2 / R: 0 dBm across 50 ohm is sqrt(0.05) V = 106.99 dBuV; an antenna factor in dB/m is added
    af = Trace(np.array([30e6, 1e9]), np.array([18.0, 28.0]), "dB", outside="nan")
    scan = prepare(Data, limit, [("af.csv", af)])
    assert scan.unit == "dBuV/m" and DBM_TO_DBUV == pytest.approx(106.99, abs=0.005)
    assert scan.level_db[0] == pytest.approx(106.99 + 18.0, abs=0.01)
    short = Trace(np.array([30e6, 300e6]), np.array([18.0, 22.0]), "dB", outside="nan")
    with pytest.raises(ScanError, match="the correction covers 30 to 300 MHz"):
        prepare(Data, limit, [("af.csv", short)])
    # Source: 47 CFR 15.31(f)(1), inverse distance: a scan at 10 m reads 20 log10(10 / 3) = 10.46 dB under 3 m
    Data.unit, Data.metadata = "dBuV/m", {"distance": "10 m"}
    far = prepare(Data, limit)
    assert far.level_db[0] == pytest.approx(10.457, abs=0.001) and "scaled to the limit's 3 m" in far.notes[0]


def test_the_demo_scan_tells_its_story():
    # demo data consistency, no outside source: samples/make_prescan.py made the scan from these invented ratios
    from conftest import REPO

    template = Template.load(REPO / "samples" / "beehive-gateway.toml")
    nominal = estimate(template.nominal)
    scan = prepare(read_scan(REPO / "samples" / "beehive-prescan.csv"), template.nominal.limit)
    c = compare(nominal, scan)
    assert sorted(np.round(c.unexplained_hz / 1e6, 1)) == [94.6, 162.4]
    result = fit(template, scan, ["path[ethernet_cable].ratio", "path[dc_cable].ratio"], nominal)
    assert result.fitted == pytest.approx([-79.0, -49.0], abs=0.5)
