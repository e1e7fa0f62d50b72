"""Physics of the simulated bench: error boxes, noise, standards, cables and ground loop,
port series resistors and fixture mounts.

Pure functions on numpy arrays (no sockets, no state). Two-ports are complex arrays of
shape ``(nfreq, 2, 2)``; S-parameters are referred to a real ``z0`` (Ω). A shunt element
``Z`` between the ports has ABCD ``[[1, 0], [1/Z, 1]]`` and a series one ``[[1, Z], [0, 1]]``
(Pozar, *Microwave Engineering*, table 4.1 [from memory]); cascades multiply ABCD
matrices, which numpy does for every frequency at once.

Noise model (documented for the measurable window, docs/references.md §1):
- an additive complex Gaussian floor on every raw S-parameter, with RMS magnitude
  ``10^(floor_db/20)·sqrt(IFBW/1 kHz)·10^(−(P − 0 dBm)/20)`` times the raw through
  level: receiver noise power grows with the IF bandwidth and is fixed in absolute
  terms, so relative to the incident wave it falls as the source power rises;
- a multiplicative trace noise ``S·(1 + ε)``, ε complex Gaussian whose real and
  imaginary parts each have RMS ``(10^(trace_db/20) − 1)·sqrt(IFBW/1 kHz)``, so the RMS
  of ``20·log10|S|`` is ``trace_db`` at 1 kHz; independent of power (it comes from the
  source and LO, not from the receiver floor).
At the demo defaults (−100 dB, 0.01 dB, 1 kHz, 0 dBm) the floor is −100 dB relative to
the through and the trace noise 0.01 dB RMS.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

Z0 = 50.0

# Reference IF bandwidth (Hz) and power (dBm) at which noise figures are specified.
REFERENCE_IFBW = 1e3
REFERENCE_POWER_DBM = 0.0


# --- two-port algebra ------------------------------------------------------------------


def abcd_to_s(abcd: np.ndarray, z0: float = Z0) -> np.ndarray:
    """S-parameters of ABCD matrices ``(n, 2, 2)`` with real reference ``z0`` (Ω)."""
    a, b, c, d = abcd[:, 0, 0], abcd[:, 0, 1], abcd[:, 1, 0], abcd[:, 1, 1]
    den = a + b / z0 + c * z0 + d
    s = np.empty_like(abcd, dtype=complex)
    s[:, 0, 0] = (a + b / z0 - c * z0 - d) / den
    s[:, 0, 1] = 2 * (a * d - b * c) / den
    s[:, 1, 0] = 2 / den
    s[:, 1, 1] = (-a + b / z0 - c * z0 + d) / den
    return s


def s_to_abcd(s: np.ndarray, z0: float = Z0) -> np.ndarray:
    """ABCD matrices of S-parameters ``(n, 2, 2)``; needs S21 ≠ 0 at every frequency."""
    s11, s12, s21, s22 = s[:, 0, 0], s[:, 0, 1], s[:, 1, 0], s[:, 1, 1]
    abcd = np.empty_like(s, dtype=complex)
    abcd[:, 0, 0] = ((1 + s11) * (1 - s22) + s12 * s21) / (2 * s21)
    abcd[:, 0, 1] = z0 * ((1 + s11) * (1 + s22) - s12 * s21) / (2 * s21)
    abcd[:, 1, 0] = ((1 - s11) * (1 - s22) - s12 * s21) / (2 * s21 * z0)
    abcd[:, 1, 1] = ((1 - s11) * (1 + s22) + s12 * s21) / (2 * s21)
    return abcd


def flip_abcd(abcd: np.ndarray) -> np.ndarray:
    """ABCD of the same two-port turned round (port 2 facing the source)."""
    a, b, c, d = abcd[:, 0, 0], abcd[:, 0, 1], abcd[:, 1, 0], abcd[:, 1, 1]
    det = a * d - b * c
    out = np.empty_like(abcd)
    out[:, 0, 0] = d / det
    out[:, 0, 1] = b / det
    out[:, 1, 0] = c / det
    out[:, 1, 1] = a / det
    return out


def series_abcd(z: np.ndarray) -> np.ndarray:
    """ABCD of a series impedance ``z`` (Ω, shape ``(n,)``)."""
    out = np.zeros((len(z), 2, 2), dtype=complex)
    out[:, 0, 0] = 1
    out[:, 0, 1] = z
    out[:, 1, 1] = 1
    return out


def shunt_abcd(z: np.ndarray) -> np.ndarray:
    """ABCD of a shunt impedance ``z`` (Ω) to ground between the ports."""
    out = np.zeros((len(z), 2, 2), dtype=complex)
    out[:, 0, 0] = 1
    out[:, 1, 0] = 1 / z
    out[:, 1, 1] = 1
    return out


def cascade(*abcds: np.ndarray) -> np.ndarray:
    """Cascade two-ports given as ABCD arrays, first one at port 1."""
    out = abcds[0]
    for item in abcds[1:]:
        out = np.matmul(out, item)
    return out


def reflection(z: np.ndarray, z0: float = Z0) -> np.ndarray:
    """Reflection coefficient of a one-port impedance ``z`` (Ω)."""
    return (z - z0) / (z + z0)


def terminate(s: np.ndarray, gamma: np.ndarray) -> np.ndarray:
    """Input reflection of two-port ``s`` with port 2 loaded by ``gamma``."""
    return s[:, 0, 0] + s[:, 0, 1] * s[:, 1, 0] * gamma / (1 - s[:, 1, 1] * gamma)


def flip_s(s: np.ndarray) -> np.ndarray:
    """S-parameters of a two-port turned round."""
    return s[:, ::-1, ::-1]


# --- error boxes -----------------------------------------------------------------------


@dataclass(frozen=True)
class ErrorBoxTerms:
    """Seeded coefficients of one port's error box (an analyser port and its test cable).

    Directivity and source match are complex smooth functions of frequency: a small
    low-frequency term plus one growing as sqrt(f/f_ref), each rotating with its own
    small delay, so they ripple slowly as real couplers and connectors do and are best
    at low frequency. Tracking carries the cable's delay ``cable_delay`` (s, one way) and
    a loss growing as sqrt(f) (skin effect of the cable).
    """

    directivity: complex
    directivity_slope: complex
    directivity_delay: float
    source_match: complex
    source_match_slope: complex
    source_match_delay: float
    tracking_gain: complex
    tracking_slope_db: float
    cable_delay: float
    reverse_ratio: complex
    switch_term: complex = 0j
    switch_term_slope: complex = 0j


# How much better the directivity and source match are at low frequency than the
# scenario's figure (which holds at f_ref): invented, of the order seen on bridges.
LOW_FREQUENCY_MARGIN_DB = 15.0


def draw_error_box_terms(
    rng: np.random.Generator,
    *,
    directivity_db: float,
    source_match_db: float,
    cable_loss_db_at_1ghz: float,
    cable_delay: float,
) -> ErrorBoxTerms:
    """Draw one port's error-box coefficients around the given magnitudes (dB at 1 GHz)."""

    def phasor(mag_db: float) -> complex:
        mag = 10 ** ((mag_db + rng.normal(0, 1.0)) / 20)
        return complex(mag * np.exp(1j * rng.uniform(-np.pi, np.pi)))

    return ErrorBoxTerms(
        directivity=phasor(directivity_db - LOW_FREQUENCY_MARGIN_DB),
        directivity_slope=phasor(directivity_db),
        directivity_delay=float(rng.uniform(0.1e-9, 0.4e-9)),
        source_match=phasor(source_match_db - LOW_FREQUENCY_MARGIN_DB),
        source_match_slope=phasor(source_match_db),
        source_match_delay=float(rng.uniform(0.2e-9, 0.8e-9)),
        tracking_gain=complex(
            10 ** (rng.normal(-1.0, 0.3) / 20) * np.exp(1j * rng.uniform(-np.pi, np.pi))
        ),
        tracking_slope_db=float(cable_loss_db_at_1ghz * rng.uniform(0.9, 1.1)),
        cable_delay=float(cable_delay * rng.uniform(0.97, 1.03)),
        reverse_ratio=complex(rng.uniform(0.95, 1.05) * np.exp(1j * rng.uniform(-0.05, 0.05))),
        switch_term=phasor(source_match_db - 8 - LOW_FREQUENCY_MARGIN_DB),
        switch_term_slope=phasor(source_match_db - 8),
    )


def error_box(f: np.ndarray, terms: ErrorBoxTerms, f_ref: float = 1e9) -> np.ndarray:
    """S-parameters ``(n, 2, 2)`` of an error box: port 1 the analyser, port 2 the cable end.

    S11 is the directivity, S22 the source match, S21·S12 the reflection tracking; the
    transmission terms carry the cable delay and loss. ``f`` in Hz.
    """
    x = np.sqrt(f / f_ref)
    w = 2 * np.pi * f
    e00 = (terms.directivity + terms.directivity_slope * x) * np.exp(
        -1j * w * terms.directivity_delay
    )
    e11 = (terms.source_match + terms.source_match_slope * x) * np.exp(
        -1j * w * terms.source_match_delay
    )
    loss = 10 ** (-terms.tracking_slope_db * x / 20)
    forward = np.sqrt(terms.tracking_gain) * loss * np.exp(-1j * w * terms.cable_delay)
    s = np.empty((len(f), 2, 2), dtype=complex)
    s[:, 0, 0] = e00
    s[:, 1, 1] = e11
    s[:, 1, 0] = forward
    s[:, 0, 1] = forward * terms.reverse_ratio
    return s


def switch_term(f: np.ndarray, terms: ErrorBoxTerms, f_ref: float = 1e9) -> np.ndarray:
    """Reflection of a port's receiver termination when the other port drives (the
    "switch term" of a three-receiver analyser): small, growing as sqrt(f)."""
    return terms.switch_term + terms.switch_term_slope * np.sqrt(f / f_ref)


def apply_switch_terms(t: np.ndarray, gamma_f: np.ndarray, gamma_r: np.ndarray) -> np.ndarray:
    """Raw S-parameters as the receivers ratio them, from the S ``t`` (n, 2, 2) seen at
    the analyser's ports, when port 2 is terminated in ``gamma_f`` during the forward
    sweep and port 1 in ``gamma_r`` during the reverse one. This is what turns the
    eight error terms of two error boxes into the twelve of SOLT."""
    t11, t12, t21, t22 = t[:, 0, 0], t[:, 0, 1], t[:, 1, 0], t[:, 1, 1]
    out = np.empty_like(t)
    den_f = 1 - t22 * gamma_f
    den_r = 1 - t11 * gamma_r
    out[:, 0, 0] = t11 + t12 * t21 * gamma_f / den_f
    out[:, 1, 0] = t21 / den_f
    out[:, 1, 1] = t22 + t21 * t12 * gamma_r / den_r
    out[:, 0, 1] = t12 / den_r
    return out


# --- calibration standards, resistors, cables, mounts ---------------------------------


@dataclass(frozen=True)
class CalibrationKit:
    """The simulated calibration standards (their definitions, as a kit documents them).

    Short: an inductance ``short_inductance`` (H) to ground. Open: a fringing capacitance
    ``open_capacitance`` (F). Load: ``load_resistance`` (Ω) in series with
    ``load_inductance`` (H). Through: flush (zero length).
    """

    short_inductance: float = 3e-12
    open_capacitance: float = 12e-15
    load_resistance: float = 50.2
    load_inductance: float = 4e-12

    def impedance(self, standard: str, f: np.ndarray) -> np.ndarray:
        """Impedance (Ω) of ``standard`` (``SHORT``, ``OPEN`` or ``LOAD``) at ``f`` (Hz)."""
        w = 2 * np.pi * f
        if standard == "SHORT":
            return 1j * w * self.short_inductance
        if standard == "OPEN":
            return 1 / (1j * w * self.open_capacitance)
        if standard == "LOAD":
            return self.load_resistance + 1j * w * self.load_inductance
        raise ValueError(f"unknown standard {standard!r}")

    def reflection(self, standard: str, f: np.ndarray, z0: float = Z0) -> np.ndarray:
        """Reflection coefficient of ``standard`` at ``f``."""
        return reflection(self.impedance(standard, f), z0)


def resistor_board_impedance(
    f: np.ndarray, resistance: float, inductance: float, capacitance: float
) -> np.ndarray:
    """Series impedance (Ω) of a port series-resistor board: ``(R + jωL) ‖ 1/(jωC)``.

    ``inductance`` (H) is the resistor body and its traces, ``capacitance`` (F) the
    parasitic across the resistor. ``resistance`` 0 means no board (0 Ω returned).
    """
    if resistance <= 0:
        return np.zeros(len(f), dtype=complex)
    w = 2 * np.pi * f
    z_rl = resistance + 1j * w * inductance
    if capacitance <= 0:
        return z_rl
    return 1 / (1 / z_rl + 1j * w * capacitance)


def ground_loop_impedance(
    f: np.ndarray,
    shield_resistance: float,
    shield_cutoff: float,
    choke_inductance: float = 0.0,
) -> np.ndarray:
    """Error impedance (Ω) in series with a shunt DUT from the two cable shields' loop.

    Identical shields of resistance ``shield_resistance`` (Ω) and cut-off
    ``shield_cutoff`` (Hz, fc = R/(2πL)): Zerr = R1R2/(R1 + R2 + jω(L1 + L2 + Lcm)),
    which is (Rsh/2)/(1 + j f/fc) without a choke (docs/references.md §2, derived from the
    EDI CON 2018 ground-loop paper and Ott 2009). A common-mode choke or isolation
    transformer of ``choke_inductance`` (H) adds jωLcm to the loop.
    """
    r = shield_resistance
    l_shield = r / (2 * np.pi * shield_cutoff)
    w = 2 * np.pi * f
    return r * r / (2 * r + 1j * w * (2 * l_shield + choke_inductance))


@dataclass(frozen=True)
class Mount:
    """One fixture position's mount: series ``resistance`` (Ω) and ``inductance`` (H) of
    the pads and vias, ``open_capacitance`` (F) across the pads, and the shorting strap
    (``strap_resistance`` Ω, ``strap_inductance`` H) used for the mount-short capture."""

    resistance: float
    inductance: float
    open_capacitance: float
    strap_resistance: float = 20e-6
    strap_inductance: float = 8e-12

    def series_impedance(self, f: np.ndarray) -> np.ndarray:
        return self.resistance + 2j * np.pi * f * self.inductance

    def with_element(self, f: np.ndarray, z_element: np.ndarray | None) -> np.ndarray:
        """Impedance (Ω) at the position: pads + (element ‖ pad capacitance).

        ``z_element`` None is an empty mount (the pad capacitance alone).
        """
        w = 2 * np.pi * f
        y_open = 1j * w * self.open_capacitance
        if z_element is None:
            return self.series_impedance(f) + 1 / y_open
        return self.series_impedance(f) + 1 / (1 / z_element + y_open)

    def strap(self, f: np.ndarray) -> np.ndarray:
        return self.strap_resistance + 2j * np.pi * f * self.strap_inductance


# --- noise -----------------------------------------------------------------------------


def noise_levels(
    *,
    floor_db: float,
    trace_noise_db: float,
    if_bandwidth: float,
    power_dbm: float,
) -> tuple[float, float]:
    """(floor RMS, trace-noise RMS) for the given IF bandwidth (Hz) and power (dBm).

    See the module docstring for the relation.
    """
    bw = np.sqrt(if_bandwidth / REFERENCE_IFBW)
    floor = 10 ** (floor_db / 20) * bw * 10 ** (-(power_dbm - REFERENCE_POWER_DBM) / 20)
    # Complex RMS √2 × the per-component RMS, which sets the dB spread.
    trace = np.sqrt(2) * (10 ** (trace_noise_db / 20) - 1) * bw
    return float(floor), float(trace)


def add_noise(
    s: np.ndarray,
    rng: np.random.Generator,
    floor_rms: float | np.ndarray,
    trace_rms: float,
) -> np.ndarray:
    """``s·(1 + ε) + n`` with complex Gaussian ε (complex RMS ``trace_rms``) and n
    (complex RMS ``floor_rms``, a number or one value per frequency)."""
    floor = np.asarray(floor_rms, dtype=float)
    if floor.ndim == 1:
        floor = floor[:, None, None]

    def complex_gaussian(rms: float | np.ndarray) -> np.ndarray:
        sigma = np.asarray(rms) / np.sqrt(2)
        return sigma * (rng.standard_normal(s.shape) + 1j * rng.standard_normal(s.shape))

    return s * (1 + complex_gaussian(trace_rms)) + complex_gaussian(floor)


def add_unmeasured(
    s: np.ndarray, rng: np.random.Generator, rate: float, sweep_rate: float = 1.0
) -> np.ndarray:
    """``s`` (n, 2, 2) with each point, by chance ``rate``, not measured (an overload of
    the receiver, say): NaN, which the analyser sends as SCPI's not-a-number. Only a sweep
    drawn by chance ``sweep_rate`` has such points (below 1: a passing overload). Draws
    nothing when ``rate`` is 0."""
    if rate <= 0:
        return s
    if sweep_rate < 1.0 and rng.random() >= sweep_rate:
        return s
    hit = rng.random(s.shape[0]) < rate
    if not np.any(hit):
        return s
    out = s.copy()
    out[hit] = np.nan
    return out


def add_glitches(s: np.ndarray, rng: np.random.Generator, rate: float, size: float) -> np.ndarray:
    """``s`` (n, 2, 2) with each point, by chance ``rate``, a glitch: its whole S-matrix
    times ``exp(size·e^jθ)`` with θ uniform (magnitude, phase or both off by ``size`` in
    natural-log units: 0.3 is 35 % or 17°). Draws nothing when ``rate`` is 0."""
    if rate <= 0:
        return s
    hit = rng.random(s.shape[0]) < rate
    if not np.any(hit):
        return s
    theta = rng.uniform(0.0, 2 * np.pi, int(np.count_nonzero(hit)))
    out = s.copy()
    out[hit] *= np.exp(size * np.exp(1j * theta))[:, None, None]
    return out
