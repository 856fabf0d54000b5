"""NEC-2 (the NEC2++ engine of the ``necpp`` package) as an independent reference for thin-wire antennas.

Method-of-moments models of a straight wire over a perfect ground plane (a monopole) or in free space (a
dipole), driven by 1 V at its feed segment.  NEC2++ reports input impedance and far-field gain but not near
fields, so the field at a point is found by reciprocity: a short probe dipole there, its coupling Z12 to the
wire from three input impedances, and its open-circuit voltage V2 = Z12 I1 = E_z h_eff.

References
----------
G. J. Burke, A. J. Poggio, "Numerical Electromagnetics Code (NEC) - Method of Moments", Lawrence Livermore
National Laboratory, 1981 (the method and the cards used here: GW, GE, GN, LD, FR, EX, XQ).
T. Molteno, "NEC2++: an NEC-2 compatible numerical electromagnetics code", University of Otago, 2014.
"""

import necpp
import numpy as np

C = 299_792_458.0
#: Segments of the probe dipole: with 21, its open-circuit voltage matches NEC's own far-field gain within
#: 0.15 dB (3 segments read 1.4 dB high: the current on so few segments is not the triangle h_eff assumes).
PROBE_SEGMENTS = 21


def _solve(f_hz, length_m, radius_m, ground=True, probe=None, load_wire=None, load_probe=None, drive="wire"):
    """Input impedance at the driven feed [ohm], with optional loads (ohm) on the wire's and the probe's feed."""
    n = necpp.nec_create()
    try:
        wavelength = C / f_hz
        segments = max(21, int(40 * length_m / wavelength) | 1)
        if ground:
            necpp.nec_wire(n, 1, segments, 0, 0, 0, 0, 0, length_m, radius_m, 1, 1)
            feed = 1
        else:
            segments |= 1
            necpp.nec_wire(n, 1, segments, 0, 0, -length_m, 0, 0, length_m, radius_m, 1, 1)
            feed = segments // 2 + 1
        middle = PROBE_SEGMENTS // 2 + 1
        if probe is not None:
            x, z, size = probe
            necpp.nec_wire(n, 2, PROBE_SEGMENTS, x, 0, z - size / 2, x, 0, z + size / 2, 1e-4, 1, 1)
        necpp.nec_geometry_complete(n, 1 if ground else 0)
        if ground:
            necpp.nec_gn_card(n, 1, 0, 0, 0, 0, 0, 0, 0)
        if load_wire is not None:
            necpp.nec_ld_card(n, 4, 1, feed, feed, load_wire.real, load_wire.imag, 0)
        if load_probe is not None:
            necpp.nec_ld_card(n, 4, 2, middle, middle, load_probe.real, load_probe.imag, 0)
        necpp.nec_fr_card(n, 0, 1, f_hz / 1e6, 0)
        tag, segment = (1, feed) if drive == "wire" else (2, middle)
        necpp.nec_ex_card(n, 0, tag, segment, 0, 1.0, 0, 0, 0, 0, 0)
        necpp.nec_xq_card(n, 0)
        return complex(necpp.nec_impedance_real(n, 0), necpp.nec_impedance_imag(n, 0))
    finally:
        necpp.nec_delete(n)


def input_impedance(f_hz, length_m, radius_m, ground=True) -> np.ndarray:
    """NEC's input impedance of a monopole of height ``length_m`` (ground) or a dipole of arms ``length_m``."""
    return np.array([_solve(f, length_m, radius_m, ground) for f in np.atleast_1d(f_hz)])


def monopole_field(f_hz, length_m, radius_m, distance_m, height_m, probe_m=0.05) -> tuple[float, complex]:
    """|E_z| [V/m] at (distance, height) for 1 V at the monopole's base, and its input impedance.

    Z12^2 = (Z11 - Z1') R22, Z1' the input impedance with the probe's reactance tuned out (load -j X22): the
    difference of two input impedances is then large enough to be exact.
    """
    open_ = 1e12 + 0j
    probe = (distance_m, height_m, probe_m)
    z22 = _solve(f_hz, length_m, radius_m, probe=probe, load_wire=open_, drive="probe")
    z11 = _solve(f_hz, length_m, radius_m, probe=probe, load_probe=open_)
    z1t = _solve(f_hz, length_m, radius_m, probe=probe, load_probe=-1j * z22.imag)
    z12 = np.sqrt((z11 - z1t) * z22.real)
    k = 2 * np.pi * f_hz / C
    h_eff = 2 / k * np.tan(k * probe_m / 4)  # sinusoidal current on the probe
    return float(abs(z12 / z11) / h_eff), z11


def loaded_monopole_impedance(f_hz, length_m, radius_m, resistance_ohm, inductance_h) -> complex:
    """NEC's impedance at the base with a series R + L (LD card type 0) in the feed segment: the source sees the
    wire and the load in series."""
    n = necpp.nec_create()
    try:
        segments = max(21, int(40 * length_m / (C / f_hz)) | 1)
        necpp.nec_wire(n, 1, segments, 0, 0, 0, 0, 0, length_m, radius_m, 1, 1)
        necpp.nec_geometry_complete(n, 1)
        necpp.nec_gn_card(n, 1, 0, 0, 0, 0, 0, 0, 0)
        necpp.nec_ld_card(n, 0, 1, 1, 1, resistance_ohm, inductance_h, 0)
        necpp.nec_fr_card(n, 0, 1, f_hz / 1e6, 0)
        necpp.nec_ex_card(n, 0, 1, 1, 0, 1.0, 0, 0, 0, 0, 0)
        necpp.nec_xq_card(n, 0)
        return complex(necpp.nec_impedance_real(n, 0), necpp.nec_impedance_imag(n, 0))
    finally:
        necpp.nec_delete(n)
