"""Decoupling network against ngspice, published formulas and their worked figures."""

import shutil
import subprocess
import sys

import numpy as np
import pytest

from emispec.decoupling import (
    Capacitor,
    Measured,
    Package,
    Plane,
    Rail,
    SeriesRL,
    TouchstoneError,
    anti_resonances,
    escape_fraction,
    lisn_impedance,
    network_impedance,
    self_resonance_hz,
    spreading_inductance,
    target_impedance,
)

from emispec.readers import read_impedance_table, read_touchstone  # noqa: E402

NGSPICE = shutil.which("ngspice")
needs_ngspice = pytest.mark.skipif(NGSPICE is None, reason="ngspice not found (Debian package ngspice)")


def ngspice_ac(netlist_body: str, vectors: list[str], tmp_path, start=1e5, stop=1e9, points_per_decade=40):
    """Run an AC analysis in ngspice and return frequency and complex vectors."""
    out = tmp_path / "ac.txt"
    netlist = tmp_path / "net.cir"
    netlist.write_text(
        "* emispec test network\n" + netlist_body
        + f"\n.control\nset wr_singlescale\nac dec {points_per_decade} {start} {stop}\n"
        + f"wrdata {out} {' '.join(vectors)}\nquit\n.endc\n.end\n",
        encoding="utf-8",
    )
    done = subprocess.run([NGSPICE, "-b", str(netlist)], capture_output=True, text=True, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    data = np.loadtxt(out)
    f = data[:, 0]
    return f, [data[:, 1 + 2 * k] + 1j * data[:, 2 + 2 * k] for k in range(len(vectors))]


def spice_parts(parts, node="pin") -> str:
    lines = []
    for k, part in enumerate(parts):
        if isinstance(part, Capacitor):
            m = part.count
            lines += [f"Rc{k} {node} a{k} {part.esr_ohm / m}", f"Lc{k} a{k} b{k} {part.inductance_h / m}",
                      f"Cc{k} b{k} 0 {part.capacitance_f * m}"]
        elif isinstance(part, Plane):
            lines.append(f"Cp{k} {node} 0 {part.capacitance_f}")
            if part.loss_tangent:  # G = w C tan(delta), frequency-dependent through ngspice's 'hertz'
                lines.append(f"Rp{k} {node} 0 R = '1/(2*pi*hertz*{part.capacitance_f}*{part.loss_tangent})'")
        elif isinstance(part, SeriesRL):
            lines += [f"Rr{k} {node} r{k} {part.resistance_ohm}", f"Lr{k} r{k} 0 {part.inductance_h}"]
    return "\n".join(lines)


RAIL = Rail(
    "io",
    3.3,
    (
        ("capacitor", Capacitor(100e-9, 0.015, 0.6e-9, 0.4e-9, 4)),
        ("capacitor", Capacitor(10e-6, 0.005, 1.1e-9, 0.5e-9, 1)),
        ("capacitor", Capacitor(1e-9, 0.05, 0.5e-9, 0.5e-9, 2)),
        ("plane", Plane(60e-4, 0.1e-3, 4.2)),
        ("regulator", SeriesRL(0.01, 20e-9)),
    ),
    SeriesRL(0.05, 25e-9),
    bead=SeriesRL(0.3, 0.6e-6),
)


@needs_ngspice
def test_rail_impedance_matches_ngspice(tmp_path):
    # Source: independent circuit simulator, ngspice AC analysis of the same R-L-C network
    body = "I1 0 pin AC 1\nRdc pin 0 1e12\n" + spice_parts([p for _, p in RAIL.parts])
    f, (v,) = ngspice_ac(body, ["v(pin)"], tmp_path)
    ours = RAIL.decoupling_impedance(f)
    assert np.max(np.abs(20 * np.log10(np.abs(ours) / np.abs(v)))) < 0.01
    assert np.max(np.abs(np.angle(ours / v))) < 1e-3


@needs_ngspice
@pytest.mark.parametrize("series_ohm", [5.0, 0.0])
def test_escaping_current_into_the_lisn_matches_ngspice(tmp_path, series_ohm):
    # Source: ngspice AC analysis; CISPR 16-1-2 V-network 50 ohm // (50 uH + 5 ohm), and the plain 50 uH one
    body = "\n".join([
        "I1 0 pin AC 1", "Rdc pin 0 1e12", spice_parts([p for _, p in RAIL.parts]),
        "Vsense pin s0 DC 0", "Rs s0 s1 0.05", "Ls s1 s2 25n", "Rb s2 s3 0.3", "Lb s3 conn 0.6u",
        f"Rl conn l1 {series_ohm if series_ohm else 1e-9}", "Ll l1 0 50u", "Rport conn 0 50",
    ])
    f, (i_escape, v_port) = ngspice_ac(body, ["i(vsense)", "v(conn)"], tmp_path)
    z_path = RAIL.supply_impedance(f) + lisn_impedance(f, series_ohm)
    ours = escape_fraction(RAIL.decoupling_impedance(f), z_path)
    assert np.max(np.abs(20 * np.log10(np.abs(ours) / np.abs(i_escape)))) < 0.01
    port = np.abs(ours) * np.abs(lisn_impedance(f, series_ohm))
    assert np.max(np.abs(20 * np.log10(port / np.abs(v_port)))) < 0.01


PACKAGED = Rail(
    "core",
    1.0,
    (
        ("capacitor", Capacitor(100e-9, 0.015, 0.6e-9, 0.4e-9, 4, spreading_h=spreading_inductance(0.1e-3, 5e-3))),
        ("capacitor", Capacitor(10e-6, 0.005, 1.1e-9, 0.5e-9, 1)),
        ("plane", Plane(60e-4, 0.1e-3, 4.2, loss_tangent=0.02)),
        ("regulator", SeriesRL(0.01, 20e-9)),
    ),
    SeriesRL(0.05, 25e-9),
    package=Package(0.4e-9, 0.01, 5e-9, 0.02),
)


@needs_ngspice
def test_package_lossy_plane_and_spreading_inductance_match_ngspice(tmp_path):
    # Source: ngspice AC analysis of the same network: the switching current enters at the die (on-die C with its
    # ESR), crosses the package R + L to the pins, where the board's parts sit (the capacitor's spreading
    # inductance added to its own, the plane's dielectric loss as G = w C tan delta), and escapes into the LISN
    pkg = PACKAGED.package
    body = "\n".join([
        "I1 0 die AC 1", "Rdc die 0 1e12", f"Rd die d1 {pkg.die_esr_ohm}", f"Cd d1 0 {pkg.die_capacitance_f}",
        f"Rk die k1 {pkg.resistance_ohm}", f"Lk k1 pin {pkg.inductance_h}",
        spice_parts([p for _, p in PACKAGED.parts]),
        "Vsense pin s0 DC 0", "Rs s0 s1 0.05", "Ls s1 conn 25n", "Rl conn l1 5", "Ll l1 0 50u", "Rport conn 0 50",
    ])
    f, (i_escape,) = ngspice_ac(body, ["i(vsense)"], tmp_path)
    ours = PACKAGED.escape(f, lisn_impedance(f))
    assert np.max(np.abs(20 * np.log10(np.abs(ours) / np.abs(i_escape)))) < 0.01
    assert np.max(np.abs(np.angle(ours / i_escape))) < 1e-3


def test_spreading_inductance_of_two_vias_in_a_plane_pair():
    # Source: H. Johnson, "Parasitic inductance of bypass capacitors", EDN 2003: L = (mu0 / pi) h ln(2 s / D);
    # mu0 / pi = 0.4 nH/mm.  h = 0.1 mm, s = 5 mm, D = 0.3 mm: 0.04 nH/mm x ... = 0.1125 nH (hand calculation)
    assert spreading_inductance(0.1e-3, 5e-3, 0.3e-3) == pytest.approx(0.4e-9 * 0.1 * np.log(2 * 5 / 0.3), rel=1e-6)
    assert spreading_inductance(0.1e-3, 5e-3, 0.3e-3) == pytest.approx(0.1403e-9, abs=0.0005e-9)


def test_dielectric_loss_lowers_the_anti_resonance_peak():
    # Source: a lossy capacitor's admittance j w C (1 - j tan delta) (Pozar, Microwave Engineering, sec. 1.3);
    # the plane-capacitor anti-resonance is damped by the loss
    lossless = Rail("r", 1.0, (("capacitor", Capacitor(100e-9, 0.01, 1e-9)), ("plane", Plane(60e-4, 0.1e-3, 4.2))),
                    SeriesRL())
    lossy = Rail("r", 1.0, (("capacitor", Capacitor(100e-9, 0.01, 1e-9)),
                            ("plane", Plane(60e-4, 0.1e-3, 4.2, loss_tangent=0.02))), SeriesRL())
    f = np.geomspace(10e6, 1e9, 4000)
    peak = anti_resonances(f, lossless.decoupling_impedance(f))[0][1]
    damped = anti_resonances(f, lossy.decoupling_impedance(f))[0][1]
    assert damped < peak / 2
    plane = Plane(60e-4, 0.1e-3, 4.2, loss_tangent=0.02)
    z = plane.impedance([1e8])[0]
    assert np.angle(z) == pytest.approx(-np.pi / 2 + np.arctan(0.02), rel=1e-9)  # loss angle delta


def test_escape_coefficients_invert_exactly():
    # impedance_for_escape must return the |Z_dec| (at its phase) that gives the asked fraction, with a package
    f = np.array([5e6, 20e6])
    z_term = lisn_impedance(f)
    z_dec = PACKAGED.decoupling_impedance(f)
    now = np.abs(PACKAGED.escape(f, z_term))
    coefficients = PACKAGED.escape_coefficients(f, z_term)
    from emispec.decoupling import impedance_for_escape

    np.testing.assert_allclose(impedance_for_escape(now, z_dec, *coefficients), np.abs(z_dec), rtol=1e-9)
    more = impedance_for_escape(1.3 * now, z_dec, *coefficients)
    assert np.all(np.isfinite(more))
    scaled = np.abs(PACKAGED.escape(f, z_term, z_dec * more / np.abs(z_dec)))
    np.testing.assert_allclose(scaled, 1.3 * now, rtol=1e-9)


@pytest.mark.parametrize("l_nh, srf_mhz", [(0.4, 25.16), (0.7, 19.02), (1.0, 15.92), (1.5, 12.99), (2.0, 11.25),
                                            (3.0, 9.19)])
def test_self_resonance_of_100_nf(l_nh, srf_mhz):
    # Source: series resonance f = 1 / (2 pi sqrt(L C)) of the R-L-C capacitor model (Bogatin 2009, ch. 8)
    cap = Capacitor(100e-9, 0.02, l_nh * 1e-9)
    assert cap.srf_hz / 1e6 == pytest.approx(srf_mhz, abs=0.01)
    assert abs(cap.impedance([cap.srf_hz])[0]) == pytest.approx(0.02, rel=1e-9)  # |Z(SRF)| = ESR


def test_capacitor_impedance_figures():
    # Source: series R-L-C, |Z| = |ESR + j(wL - 1/(wC))|; 100 nF, 1 nH, 20 mohm
    cap = Capacitor(100e-9, 0.020, 1e-9)
    z = np.abs(cap.impedance([1e6, cap.srf_hz, 100e6]))
    np.testing.assert_allclose(z, [1.585, 0.020, 0.613], atol=0.0015)
    assert self_resonance_hz(10e-9, 1e-9) / 1e6 == pytest.approx(50.33, abs=0.01)
    assert self_resonance_hz(1e-6, 1e-9) / 1e6 == pytest.approx(5.03, abs=0.01)


def test_count_and_mounting_inductance():
    four = Capacitor(100e-9, 0.02, 0.6e-9, 0.4e-9, count=4)
    one = Capacitor(100e-9, 0.02, 1.0e-9)
    np.testing.assert_allclose(four.impedance([1e6, 1e8]), one.impedance([1e6, 1e8]) / 4)


def test_anti_resonance_of_100_nf_and_1_nf():
    # Source: parallel resonance of two series R-L-C branches; closed form for equal L:
    # f_AR = (1/2pi) sqrt((1/C1 + 1/C2) / (2L)) = 113.10 MHz (facts: peak 112.96 MHz, 6.96 ohm)
    parts = [Capacitor(100e-9, 0.020, 1e-9), Capacitor(1e-9, 0.050, 1e-9)]
    f = np.geomspace(10e6, 1e9, 20000)
    peaks = anti_resonances(f, network_impedance(parts, f))
    assert len(peaks) == 1
    f_peak, z_peak, lo, hi = peaks[0]
    closed_form = np.sqrt((1 / 100e-9 + 1 / 1e-9) / 2e-9) / (2 * np.pi)
    assert f_peak == pytest.approx(closed_form, rel=3e-3)
    assert f_peak / 1e6 == pytest.approx(112.96, abs=0.05)
    assert z_peak == pytest.approx(6.96, abs=0.02)
    assert lo < f_peak < hi


@pytest.mark.parametrize("volts, ripple, amps, ohms", [(1.0, 0.05, 2.0, 0.025), (3.3, 0.05, 1.0, 0.165),
                                                       (0.8, 0.02, 40.0, 0.0004)])
def test_target_impedance(volts, ripple, amps, ohms):
    # Source: Smith et al., IEEE Trans. Adv. Packag. 22(3), 1999: Z_t = V x ripple / delta I
    assert target_impedance(volts, ripple, amps) == pytest.approx(ohms)


def test_plane_capacitance():
    # Source: parallel-plate capacitor C = eps0 epsr A / d; 10 x 10 cm, 0.1 mm, epsr 4.3 -> 3.807 nF
    assert Plane(0.01, 0.1e-3, 4.3).capacitance_f == pytest.approx(3.807e-9, rel=1e-3)
    # 4 mil, per square inch: 241.8 pF
    assert Plane(0.0254**2, 4 * 25.4e-6, 4.3).capacitance_f == pytest.approx(241.8e-12, rel=1e-3)


@pytest.mark.parametrize("f_hz, ohms", [(150e3, 34.29), (500e3, 47.64), (1e6, 49.38)])
def test_plain_lisn_impedance(f_hz, ohms):
    # Source: CISPR 16-1-2 50 ohm // 50 uH network, |Z| derived: 34.29 / 47.64 / 49.38 ohm
    assert abs(lisn_impedance([f_hz], series_ohm=0.0)[0]) == pytest.approx(ohms, abs=0.01)


def test_lisn_with_its_5_ohm():
    # Source: 50 ohm // (5 ohm + j w 50 uH), evaluated by hand at 150 kHz
    branch = 5 + 2j * np.pi * 150e3 * 50e-6
    assert abs(lisn_impedance([150e3])[0]) == pytest.approx(abs(branch * 50 / (branch + 50)), rel=1e-12)
    assert abs(lisn_impedance([30e6])[0]) == pytest.approx(50.0, abs=0.1)


def write_touchstone(path, f, s_rows, comment):
    """Touchstone v1 in RI format, written here by hand (independent of scikit-rf's writer)."""
    with open(path, "w", encoding="utf-8") as handle:
        handle.write(f"! {comment}\n# Hz S RI R 50\n")
        for freq, row in zip(f, s_rows):
            handle.write(f"{freq:.9e} " + " ".join(f"{v.real:.12e} {v.imag:.12e}" for v in row) + "\n")


def test_touchstone_one_port_and_shunt_through_give_back_the_rlc(tmp_path):
    # Source: S11 = (Z - Z0)/(Z + Z0) for a one-port; S21 = 2Z/(2Z + Z0) for a shunt element between two Z0 ports
    pytest.importorskip("skrf")
    cap = Capacitor(100e-9, 0.02, 0.8e-9)
    f = np.geomspace(1e5, 2e9, 301)
    z = cap.impedance(f)
    write_touchstone(tmp_path / "c.s1p", f, [[(zi - 50) / (zi + 50)] for zi in z], "generated 100 nF")
    s21 = 2 * z / (2 * z + 50)
    s11 = -50 / (2 * z + 50)
    write_touchstone(tmp_path / "c.s2p", f, [[a, b, b, a] for a, b in zip(s11, s21)], "generated shunt-through")
    for name in ("c.s1p", "c.s2p"):
        f_read, z_read = read_touchstone(tmp_path / name)
        np.testing.assert_allclose(f_read, f, rtol=1e-9)
        np.testing.assert_allclose(z_read, z, rtol=1e-6)
        between = np.geomspace(2e5, 1e9, 50)
        measured = Measured(f_read, z_read)
        assert np.max(np.abs(20 * np.log10(np.abs(measured.impedance(between)) / np.abs(cap.impedance(between))))) < 0.05


def test_touchstone_without_scikit_rf_names_the_extra(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "skrf", None)  # import skrf -> ImportError
    with pytest.raises(TouchstoneError, match=r"emispec\[touchstone\]"):
        read_touchstone(tmp_path / "x.s1p")


def test_impedance_tables(tmp_path):
    cap = Capacitor(1e-6, 0.01, 1e-9)
    f = np.geomspace(1e5, 1e9, 41)
    z = cap.impedance(f)
    polar = tmp_path / "polar.csv"
    polar.write_text("# source: generated from a known R-L-C\nfrequency_hz,magnitude_ohm,phase_deg\n"
                     + "".join(f"{a},{abs(b)},{np.degrees(np.angle(b))}\n" for a, b in zip(f, z)))
    rect = tmp_path / "rect.csv"
    rect.write_text("frequency_hz,resistance_ohm,reactance_ohm\n" + "".join(f"{a},{b.real},{b.imag}\n"
                                                                          for a, b in zip(f, z)))
    for path in (polar, rect):
        f_read, z_read = read_impedance_table(path)
        np.testing.assert_allclose(z_read, z, rtol=1e-9)
    bad = tmp_path / "bad.csv"
    bad.write_text("f,z\n1,2\n")
    with pytest.raises(TouchstoneError, match="columns"):
        read_impedance_table(bad)


def test_measured_part_extends_as_inductor_above_and_capacitor_below():
    f = np.array([1e6, 1e7, 1e8])
    z = np.array([0.1 - 10j, 0.1 + 0j, 0.1 + 5j])
    part = Measured(f, z)
    assert part.impedance([1e9])[0] == pytest.approx(0.1 + 50j)
    assert part.impedance([1e5])[0] == pytest.approx(0.1 - 100j)


def test_peak_prominence_equals_scipy_find_peaks():
    # Source: scipy.signal.find_peaks(prominence=...) as the independent reference for the peak search
    from scipy.signal import find_peaks

    from emispec.decoupling import _prominent_peaks

    rng = np.random.default_rng(7)
    f = np.geomspace(1e5, 2e9, 4000)
    for _ in range(20):
        parts = [Capacitor(10 ** rng.uniform(-10, -5), 10 ** rng.uniform(-3, -1), 10 ** rng.uniform(-10, -8.5))
                 for _ in range(rng.integers(2, 6))] + [Plane(rng.uniform(10, 100) * 1e-4, 0.1e-3, 4.2)]
        level = 20 * np.log10(np.abs(network_impedance(parts, f)))
        for prominence in (1.0, 3.0, 10.0):
            np.testing.assert_array_equal(_prominent_peaks(level, prominence), find_peaks(level, prominence=prominence)[0])
