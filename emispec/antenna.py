"""A cable as an antenna: a thin straight wire driven at its base by a common-mode voltage.

The wire has length ``h`` and radius ``a``.  As a **monopole** it stands
vertically on the test site's ground plane, driven at its base between the
wire and the plane (the board and the enclosure sit at the base); by image
theory it is half of a centre-fed dipole of length 2h in free space, with half
its input impedance.  As a **dipole** the board and enclosure are a second arm
of the same length (a long second cable or a large enclosure; for a small
board this overstates the field, the safe side).

Current and impedance: the wire is an open-ended transmission line whose
series resistance takes the power the current radiates.

- Characteristic impedance: Schelkunoff's average value for a thin
  monopole, Z0 = 60 [ln(2 l / a) - 1] (recalled from memory), with the
  length l limited to half a wavelength: on a longer wire the standing
  wave repeats every half wavelength and the average is taken over one
  section.  The limit lowers the antiresonant impedance of long wires; the
  tests show that it keeps the current at antiresonances within 3 dB of
  NEC-2's instead of 10 dB below.
- Phase length psi = k h (1 + delta): the end of a thick wire makes it
  electrically longer.  delta is set so that the line's reactance vanishes
  where the induced-EMF reactance of the sinusoidal current does, at the
  odd quarter-wave lengths (tan(psi - k h) = X_m / Z0 there), and is
  interpolated between them.
- Radiation as loss: the radiation resistance R_m of the sinusoidal current,
  referred to its maximum (induced EMF, with Si and Ci summed in numpy), spread as
  a series resistance r along the line so that it dissipates what the
  current radiates: r h = 2 R_m / (1 - sin 2psi / 2psi).  Then
  Z_in = Zc coth(gamma h) with gamma h = j psi s, Zc = Z0 s,
  s = sqrt(1 - j r h / (Z0 psi)).  At a series resonance Z_in = R_m (36.5
  ohm for a quarter-wave monopole); at an antiresonance it stays finite.
- The current's maximum I_m = I_base j / sinh(gamma h) drives the field of
  the sinusoidal current I_m sin(k (h - |z|)).

Field: the exact near and far field E_z of that current and its image
(Balanis, sec. 8.3, the finite dipole's near field: E_z = -j 30 I_m
[e^-jkR1 / R1 + e^-jkR2 / R2 - 2 cos(kh) e^-jkr / r]), vertically polarised,
the largest over the receive antenna's height scan of 1 to 4 m (CISPR 16-2-3)
at the limit's distance.

References
----------
C. A. Balanis, *Antenna Theory: Analysis and Design*, 4th ed., Wiley, 2016,
ch. 4 (radiation resistance of the finite dipole), ch. 8 (induced EMF: mutual
impedance, near field of the finite dipole).
S. A. Schelkunoff, H. T. Friis, *Antennas: Theory and Practice*, Wiley, 1952
(average characteristic impedance of a thin antenna; the antenna as a lossy
transmission line).
CISPR 16-2-3: receive antenna height scan 1 m to 4 m.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .constants import C, EPSILON_0, MU_0

__all__ = ["Wire", "HEIGHTS_M", "mutual_impedance", "near_field_ez", "ETA_0", "log_grid", "on_grid"]

#: Impedance of free space [ohm].
ETA_0 = float(np.sqrt(MU_0 / EPSILON_0))
#: Euler's constant (in the induced-EMF integrals).
EULER = 0.5772156649015329
#: Receive antenna heights of the height scan [m] (CISPR 16-2-3: 1 m to 4 m), every 0.1 m.
HEIGHTS_M = np.linspace(1.0, 4.0, 31)
#: Frequency grid on which a wire's response is computed, points per decade: resonances of a thin wire are a few
#: per cent wide, so log-linear interpolation on this grid is exact to far below 0.01 dB.
GRID_PER_DECADE = 2000


def mutual_impedance(frequency_hz, length_m: float, radius_m: float) -> tuple[np.ndarray, np.ndarray]:
    """Radiation resistance and reactance of a centre-fed dipole of total length ``length_m`` carrying a sinusoidal
    current, referred to the current's maximum [ohm] (induced EMF).

    References
    ----------
    Balanis (2016), eq. 4-70 (R) and eq. 8-60b (X).
    """
    k = 2 * np.pi * np.asarray(frequency_hz, dtype=float) / C
    x = k * length_m
    si1, ci1 = sici(x)
    si2, ci2 = sici(2 * x)
    _, ci_a = sici(2 * k * radius_m**2 / length_m)
    resistance = ETA_0 / (2 * np.pi) * (EULER + np.log(x) - ci1 + 0.5 * np.sin(x) * (si2 - 2 * si1)
                                        + 0.5 * np.cos(x) * (EULER + np.log(x / 2) + ci2 - 2 * ci1))
    reactance = ETA_0 / (4 * np.pi) * (2 * si1 + np.cos(x) * (2 * si1 - si2)
                                       - np.sin(x) * (2 * ci1 - ci2 - ci_a))
    return resistance, reactance


#: Below this argument Si and Ci are summed from their power series, above from the asymptotic series (both then
#: accurate to about 1e-9; the tests compare with scipy.special.sici).
SERIES_UP_TO = 20.0


def sici(x) -> tuple[np.ndarray, np.ndarray]:
    """Sine and cosine integrals Si(x) and Ci(x) for x > 0 (numpy only: scipy.special costs a third of a second
    to import, at every start of the command line).

    References
    ----------
    M. Abramowitz, I. A. Stegun, *Handbook of Mathematical Functions*, 1964, eqs. 5.2.14 and 5.2.16 (power
    series), 5.2.8, 5.2.9, 5.2.34 and 5.2.35 (auxiliary functions f, g and their asymptotic series).
    """
    x = np.asarray(x, dtype=float)
    small = np.minimum(x, SERIES_UP_TO)
    si = np.zeros(x.shape)
    cos_sum = np.zeros(x.shape)
    term = small.copy()  # x^(2n+1) / (2n+1)! with alternating sign
    for n in range(90):
        si += term / (2 * n + 1)
        cos_term = -term * small / (2 * n + 2)  # (-1)^(n+1) x^(2n+2) / (2n+2)!
        cos_sum += cos_term / (2 * n + 2)
        term = cos_term * small / (2 * n + 3)
    ci = EULER + np.log(small) + cos_sum
    large = np.maximum(x, SERIES_UP_TO)
    f = np.zeros(x.shape)
    g = np.zeros(x.shape)
    term = np.ones(x.shape)  # (2n)! / x^(2n) with alternating sign
    for n in range(12):
        f += term
        g += term * (2 * n + 1) / large
        term = -term * (2 * n + 1) * (2 * n + 2) / large**2
    f, g = f / large, g / large
    far = x > SERIES_UP_TO
    si = np.where(far, np.pi / 2 - f * np.cos(large) - g * np.sin(large), si)
    ci = np.where(far, f * np.sin(large) - g * np.cos(large), ci)
    return si, ci


def near_field_ez(frequency_hz, current_max_a, half_length_m: float, rho_m, z_m) -> np.ndarray:
    """E_z [V/m, same kind as the current] of a centre-fed dipole from z = -h to h with the sinusoidal current
    I_m sin(k (h - |z|)), at radius ``rho_m`` and height ``z_m`` from its centre: exact, near field included.

    References
    ----------
    Balanis (2016), sec. 8.3 (near fields of a finite dipole).
    """
    f = np.asarray(frequency_hz, dtype=float)
    k = 2 * np.pi * f / C
    h = half_length_m
    r1 = np.sqrt(rho_m**2 + (z_m - h) ** 2)
    r2 = np.sqrt(rho_m**2 + (z_m + h) ** 2)
    r0 = np.sqrt(rho_m**2 + z_m**2)
    bracket = np.exp(-1j * k * r1) / r1 + np.exp(-1j * k * r2) / r2 - 2 * np.cos(k * h) * np.exp(-1j * k * r0) / r0
    return -1j * ETA_0 / (4 * np.pi) * np.asarray(current_max_a) * bracket


@dataclass(frozen=True)
class Wire:
    """A straight thin wire: a monopole of height ``length_m`` over ground, or a dipole of two such arms.

    Impedances are the monopole's; a dipole's are twice as large (image theory).
    """

    length_m: float
    radius_m: float
    geometry: str = "monopole"

    @property
    def arms(self) -> int:
        """Arms in series at the feed: 1 for a monopole (its image is the ground plane's), 2 for a dipole."""
        return 1 if self.geometry == "monopole" else 2

    def characteristic_ohm(self, frequency_hz) -> np.ndarray:
        """Average characteristic impedance of the monopole, Z0 = 60 [ln(2 l / a) - 1], l = min(h, lambda / 4)
        doubled (Schelkunoff, recalled from memory; the half-wave limit is this model's, see the module)."""
        wavelength = C / np.asarray(frequency_hz, dtype=float)
        section = np.minimum(2 * self.length_m, wavelength / 2)
        return 60.0 * (np.log(section / self.radius_m) - 1.0)

    def phase_length(self, frequency_hz) -> np.ndarray:
        """psi = k h (1 + delta) [rad]; delta from the induced-EMF reactance at the odd quarter-wave lengths."""
        kh = 2 * np.pi * np.asarray(frequency_hz, dtype=float) / C * self.length_m
        count = int(np.max(kh, initial=0.0) / np.pi) + 2
        kh_n = (2 * np.arange(1, count + 1) - 1) * np.pi / 2
        f_n = kh_n * C / (2 * np.pi * self.length_m)
        _, x_dipole = mutual_impedance(f_n, 2 * self.length_m, self.radius_m)
        delta = np.arctan(x_dipole / 2 / self.characteristic_ohm(f_n)) / kh_n
        return kh * (1 + np.interp(kh, kh_n, delta))

    def line(self, frequency_hz) -> tuple[np.ndarray, np.ndarray]:
        """The monopole as a lossy open line: gamma h and its characteristic impedance Zc (complex)."""
        f = np.asarray(frequency_hz, dtype=float)
        z0 = self.characteristic_ohm(f)
        psi = self.phase_length(f)
        r_dipole, _ = mutual_impedance(f, 2 * self.length_m, self.radius_m)
        loss = r_dipole / (z0 * (1 - np.sin(2 * psi) / (2 * psi)))  # r h / Z0, the monopole's R_m = R_dipole / 2
        s = np.sqrt(1 - 1j * loss / psi)
        return 1j * psi * s, z0 * s

    def input_impedance(self, frequency_hz) -> np.ndarray:
        """Impedance at the feed [ohm]: the monopole's against ground, or the dipole's between its arms."""
        gamma_h, zc = self.line(frequency_hz)
        return self.arms * zc / np.tanh(gamma_h)

    def current_max(self, frequency_hz, base_current_a) -> np.ndarray:
        """Amplitude I_m of the sinusoidal current that carries ``base_current_a`` at the feed."""
        gamma_h, _ = self.line(frequency_hz)
        return 1j * np.asarray(base_current_a) / np.sinh(gamma_h)

    def field_per_amp(self, frequency_hz, distance_m: float, reflection) -> np.ndarray:
        """|E| at ``distance_m`` per ampere (RMS) at the feed [V/m/A]: the monopole's largest over the height scan,
        the dipole's broadside times the site's ground ``reflection`` factor."""
        f = np.asarray(frequency_hz, dtype=float)
        return self._field(f, np.abs(self.current_max(f, 1.0)), distance_m, reflection)

    def field_per_volt(self, frequency_hz, series_ohm, distance_m: float, reflection) -> np.ndarray:
        """|E| at ``distance_m`` per volt at the feed, through ``series_ohm`` in series [V/m/V]."""
        f = np.asarray(frequency_hz, dtype=float)
        gamma_h, zc = self.line(f)
        base = 1.0 / (self.arms * zc / np.tanh(gamma_h) + series_ohm)
        return self._field(f, np.abs(base / np.sinh(gamma_h)), distance_m, reflection)

    def _field(self, f: np.ndarray, i_max: np.ndarray, distance_m: float, reflection) -> np.ndarray:
        if self.geometry == "monopole":
            field = np.abs(near_field_ez(f[:, None], i_max[:, None], self.length_m, distance_m, HEIGHTS_M[None, :]))
            return field.max(axis=1)
        return np.asarray(reflection) * np.abs(near_field_ez(f, i_max, self.length_m, distance_m, 0.0))

    def series_resonances_hz(self, low_hz: float, high_hz: float) -> np.ndarray:
        """Frequencies where the wire's reactance vanishes with the current at its feed largest (psi an odd multiple
        of pi / 2), in [low_hz, high_hz]."""
        grid = log_grid(low_hz, high_hz)
        psi = self.phase_length(grid)  # increasing with frequency
        wanted = (2 * np.arange(int(psi[-1] / np.pi + 0.5) + 1) + 1) * np.pi / 2
        wanted = wanted[(wanted >= psi[0]) & (wanted <= psi[-1])]
        return np.exp(np.interp(wanted, psi, np.log(grid)))


def log_grid(low_hz: float, high_hz: float) -> np.ndarray:
    """Grid points 10^(k / GRID_PER_DECADE) covering [low_hz, high_hz] (the same points whatever the span asked)."""
    first = int(np.floor(np.log10(low_hz) * GRID_PER_DECADE))
    last = int(np.ceil(np.log10(high_hz) * GRID_PER_DECADE))
    return 10.0 ** (np.arange(first, max(last, first + 1) + 1) / GRID_PER_DECADE)


def on_grid(frequency_hz, response) -> np.ndarray:
    """``response(grid)`` (positive values) on :func:`log_grid` over the frequencies, interpolated log-linearly
    at them: a wire's response is computed once per grid point, not once per spectral line."""
    f = np.asarray(frequency_hz, dtype=float)
    if f.size == 0:
        return np.zeros(f.shape)
    grid = log_grid(float(f.min()), float(f.max()))
    values = np.asarray(response(grid), dtype=float)
    with np.errstate(divide="ignore"):
        return np.exp(np.interp(np.log(f), np.log(grid), np.log(values)))
