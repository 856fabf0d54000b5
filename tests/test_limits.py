"""Bundled limits against the regulations and standards they name, and the loaders."""

import csv

import numpy as np
import pytest

from conftest import DATA
from emispec.limits import LimitError, bundled_limits, limit_line, load_limit, upper_frequency_hz


def reference_points():
    with open(DATA / "bundled_limit_points.csv", encoding="utf-8") as handle:
        rows = [line for line in handle if not line.startswith("#")]
    return list(csv.DictReader(rows))


@pytest.mark.parametrize("point", reference_points(), ids=lambda p: f"{p['limit']}-{p['detector']}-{p['frequency_hz']}")
def test_bundled_limit_equals_its_document(point):
    # Source: per row of tests/data/bundled_limit_points.csv (CISPR 32:2015 Annex A; 47 CFR 15.107, 15.109, 15.35(b));
    # rows marked memory=yes are CISPR 32 class A above 1 GHz, from memory
    limit = load_limit(point["limit"])
    value = float(point["value"])
    expected = 20 * np.log10(value) if point["unit"] == "uV/m" else value
    level = limit.lines[point["detector"]].level(float(point["frequency_hz"]))[0]
    assert level == pytest.approx(expected, abs=0.01)


def test_every_bundled_limit_names_its_source_and_is_covered_by_the_reference_table():
    covered = {p["limit"] for p in reference_points()}
    for name in bundled_limits():
        limit = load_limit(name)
        assert "CISPR" in limit.source or "CFR" in limit.source
        assert name in covered


@pytest.mark.parametrize("name", ["cispr32-class-b-conducted-mains", "fcc15-class-b-conducted"])
@pytest.mark.parametrize(
    "f_mhz, qp, av",
    [(0.2, 63.61, 53.61), (0.25, 61.76, 51.76), (0.3, 60.24, 50.24), (0.4, 57.85, 47.85)],
)
def test_sloped_segment_decreases_linearly_with_log_f(name, f_mhz, qp, av):
    # Source: 47 CFR 15.107(a) and CISPR 32 Table A.10: 66 to 56 dBuV (QP), 56 to 46 (AV) linear in log f,
    # 0.15 to 0.5 MHz; values from L = 66 - 10 log10(f/0.15) / log10(0.5/0.15)
    limit = load_limit(name)
    expected_qp = 66 - 10 * np.log10(f_mhz / 0.15) / np.log10(0.5 / 0.15)
    assert expected_qp == pytest.approx(qp, abs=0.01)
    assert limit.lines["QP"].level(f_mhz * 1e6)[0] == pytest.approx(expected_qp, abs=1e-9)
    assert limit.lines["AV"].level(f_mhz * 1e6)[0] == pytest.approx(av, abs=0.01)


def test_three_metre_cispr_limits_are_ten_metre_plus_ten_db():
    # Source: CISPR 32:2015 Table A.4: the 3 m class B limits are the 10 m limits + 10 dB
    f = np.geomspace(30e6, 1e9, 200)
    ten = load_limit("cispr32-class-b-radiated-10m").lines["QP"].level(f)
    three = load_limit("cispr32-class-b-radiated-3m").lines["QP"].level(f)
    np.testing.assert_allclose(three - ten, 10.0)


def test_fcc_peak_line_is_average_plus_20_db():
    # Source: 47 CFR 15.35(b): peak limit = average limit + 20 dB above 1 GHz
    for name in ("fcc15-class-b-radiated-3m", "fcc15-class-a-radiated-10m"):
        limit = load_limit(name)
        f = np.geomspace(1e9, 40e9, 20)
        np.testing.assert_allclose(limit.lines["PK"].level(f) - limit.lines["AV"].level(f), 20.0)


def test_step_takes_the_lower_level_at_the_boundary_and_nan_outside():
    line = limit_line("QP", np.array([30e6, 230e6, 230e6, 1e9]), np.array([30.0, 30.0, 37.0, 37.0]))
    levels = line.level(np.array([29e6, 30e6, 229.9e6, 230e6, 230.1e6, 1e9, 1.1e9]))
    np.testing.assert_allclose(levels, [np.nan, 30, 30, 30, 37, 37, np.nan])
    rising = limit_line("QP", np.array([1e6, 2e6, 2e6, 3e6]), np.array([50.0, 50.0, 40.0, 40.0]))
    assert rising.level(2e6)[0] == 40.0


@pytest.mark.parametrize(
    "fx_mhz, upper_mhz",
    [(1.0, 30), (1.705, 1000), (48, 1000), (108, 1000), (200, 2000), (500, 2000), (800, 5000), (1500, 7500),
     (10000, 40000)],
)
def test_fcc_upper_frequency_rule(fx_mhz, upper_mhz):
    # Source: 47 CFR 15.33(b)(1) table (below 1.705 MHz -> 30 MHz ... above 1000 MHz -> 5th harmonic or 40 GHz)
    assert upper_frequency_hz("fcc-15.33", fx_mhz * 1e6) == pytest.approx(upper_mhz * 1e6)


@pytest.mark.parametrize("fx_mhz, upper_mhz", [(48, 1000), (108, 1000), (300, 2000), (900, 5000), (1100, 5500),
                                               (2000, 6000)])
def test_cispr32_upper_frequency_rule(fx_mhz, upper_mhz):
    # Source: CISPR 32:2015 Table 1 (highest internal frequency Fx); values recalled from memory
    assert upper_frequency_hz("cispr32", fx_mhz * 1e6) == pytest.approx(upper_mhz * 1e6)


def test_csv_limit_with_metadata(tmp_path):
    path = tmp_path / "inhouse.csv"
    path.write_text(
        "# title: in-house line\n# measurement: radiated\n# distance: 3 m\n# unit: dBuV/m\n# detector: PK\n"
        "frequency,level\n30 MHz,45\n1 GHz,55\n",
        encoding="utf-8",
    )
    limit = load_limit(str(path))
    assert limit.detectors == ("PK",) and limit.distance_m == 3.0
    # linear in dB over log f: the geometric mean frequency sits halfway
    assert limit.lines["PK"].level(np.sqrt(30e6 * 1e9))[0] == pytest.approx(50.0)


def test_toml_limit_with_csv_line(tmp_path):
    (tmp_path / "qp.csv").write_text("150000,60\n30000000,50\n", encoding="utf-8")
    (tmp_path / "mine.toml").write_text(
        'title = "t"\nsource = "invented"\nmeasurement = "conducted"\nunit = "dBuV"\n[lines]\nQP = "qp.csv"\n',
        encoding="utf-8",
    )
    limit = load_limit(str(tmp_path / "mine.toml"))
    assert limit.lines["QP"].level(150e3)[0] == 60.0


@pytest.mark.parametrize(
    "body, key",
    [
        ('measurement = "radiated"\nunit = "dBuV/m"\n[lines]\nQP = [["30 MHz", 40.0], ["1 GHz", 40.0]]\n', "distance"),
        ('measurement = "sniffed"\nunit = "dBuV"\n[lines]\nQP = [["1 MHz", 40.0], ["2 MHz", 40.0]]\n', "measurement"),
        ('measurement = "conducted"\nunit = "dBuV"\n[lines]\nXX = [["1 MHz", 40.0], ["2 MHz", 40.0]]\n', "lines.XX"),
        ('measurement = "conducted"\nunit = "dBuV"\n[lines]\nQP = [["2 MHz", 40.0], ["1 MHz", 40.0]]\n', "lines.QP"),
        ('measurement = "conducted"\nunit = "dBuV"\n[lines]\nQP = [["1 us", 40.0], ["2 MHz", 40.0]]\n', "lines.QP[0]"),
        ('measurement = "conducted"\nunit = "dBuV/m"\n[lines]\nQP = [["1 MHz", 40.0], ["2 MHz", 40.0]]\n', "unit"),
        ('measurement = "conducted"\nunit = "dBuV"\ncolour = 1\n[lines]\nQP = [["1 MHz", 4], ["2 MHz", 4]]\n', "colour"),
        ('measurement = "radiated"\ndistance = "3 m"\nunit = "dBuV/m"\n[lines]\nQP = [["1 GHz", 4], ["2 GHz", 4]]\n',
         "lines.QP"),
    ],
)
def test_malformed_limit_files_name_the_key(tmp_path, body, key):
    path = tmp_path / "bad.toml"
    path.write_text(body, encoding="utf-8")
    with pytest.raises(LimitError) as info:
        load_limit(str(path))
    assert info.value.key == key
    assert str(path) in str(info.value)
