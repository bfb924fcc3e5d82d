"""Stability margins of the balance loop, one actuator input at a time.

For each actuator input the loop is broken at the plant's input i (the other inputs' loops stay closed) and the
loop transfer L_i (:func:`upswing.synthesis.loops.broken_loop`) is read on the frequency axis, s = j w for the
continuous design and z = e^(j w T) up to the Nyquist frequency pi / T for the discrete ones:

* gain margin: the interval (k_low, k_high) of factors k by which input i's gain may be scaled before the loop goes
  unstable; the critical factors are 1 / |L_i| where L_i is real and negative (phase crossovers). k_low = 0 when
  any reduction is safe, k_high = inf when no increase destabilizes.
* phase margin: the smallest |angle(L_i) + 180 deg| (wrapped to +-180 deg) over the gain crossovers |L_i| = 1.
* delay margin: the smallest extra delay that destabilizes, min over gain crossovers of
  ((angle(L_i) + 180 deg) mod 360 deg) / w [s]; in samples, times the loop rate.
* disk margin (symmetric, skew 0): alpha = 1 / max_w |S - 1/2| with S = 1 / (1 + L_i); the loop tolerates any
  simultaneous gain and phase change inside the disk, i.e. gains in [(2 - alpha) / (2 + alpha),
  (2 + alpha) / (2 - alpha)] or phase +-2 arctan(alpha / 2) (Blight, Dailey & Gangsaas, 1994; Seiler, Packard &
  Gahinet, 2020).

Designs whose delay margin is under :data:`DELAY_MARGIN_MIN_SAMPLES` loop periods are flagged: jitter and an
unplanned sample of latency then suffice to destabilize them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.optimize

from upswing.synthesis.balance import BalanceDesign
from upswing.synthesis.estimation import EstimatorDesign
from upswing.synthesis.loops import (
    LinearSystem,
    broken_loop,
    closed_loop,
    continuous_controller,
    continuous_plant,
    discrete_controller,
    discrete_plant,
    measurement_matrix,
)

DELAY_MARGIN_MIN_SAMPLES = 2.0  # flag below two loop periods of delay margin
POINTS_PER_DECADE = 400  # frequency grid density; crossings are then refined by root finding


@dataclass(frozen=True)
class LoopMargins:
    """Margins at one actuator input (loop broken there, the others closed).

    Attributes
    ----------
    input : str
        The input's name (``cart``, ``shoulder``, ``elbow``).
    gain_margin : tuple of float
        (k_low, k_high): the loop stays stable for gain factors strictly between them [-]; 0 / inf mean unbounded.
    phase_margin_deg : float
        [deg]; inf when |L| never crosses 1.
    delay_margin_s : float
        [s]; inf when |L| never crosses 1.
    delay_margin_samples : float
        delay_margin_s times the loop rate [samples].
    disk_margin : float
        alpha of the symmetric disk margin [-].
    disk_gain_margin : tuple of float
        Gain interval the disk guarantees [-].
    disk_phase_margin_deg : float
        Phase change the disk guarantees [deg].
    sensitivity_peak : float
        max_w |1 / (1 + L)| [-].
    gain_crossover_hz : tuple of float
        Frequencies where |L| = 1 [Hz].
    phase_crossover_hz : tuple of float
        Frequencies where L is real and negative [Hz].
    stable : bool
        Whether the closed loop (all inputs connected) is stable; margins are meaningless when it is not.
    flagged : bool
        delay_margin_samples < :data:`DELAY_MARGIN_MIN_SAMPLES`.
    """

    input: str
    gain_margin: tuple[float, float]
    phase_margin_deg: float
    delay_margin_s: float
    delay_margin_samples: float
    disk_margin: float
    disk_gain_margin: tuple[float, float]
    disk_phase_margin_deg: float
    sensitivity_peak: float
    gain_crossover_hz: tuple[float, ...]
    phase_crossover_hz: tuple[float, ...]
    stable: bool
    flagged: bool


@dataclass(frozen=True)
class MarginReport:
    """Margins of one design at every actuator input.

    Attributes
    ----------
    design : str
        ``continuous``, ``discrete``, ``discrete_kalman`` or ``discrete_finite_difference``.
    sample_rate : float
        Loop rate used to express delays in samples [Hz].
    loops : tuple of LoopMargins
        One per input, in input order.
    flags : tuple of str
        Sentences for the user (delay margin under two samples, unstable loop).
    """

    design: str
    sample_rate: float
    loops: tuple[LoopMargins, ...]
    flags: tuple[str, ...]

    def loop(self, name: str) -> LoopMargins:
        for lm in self.loops:
            if lm.input == name:
                return lm
        raise KeyError(name)


# ----------------------------------------------------------------------------------------------------------------
# One loop


def _frequency_grid(L: LinearSystem) -> np.ndarray:
    """Log-spaced angular frequencies [rad/s] spanning the loop's dynamics (to pi / T for discrete loops)."""
    poles = L.poles
    if L.dt is not None:
        nonzero = poles[np.abs(poles) > 1e-12]
        poles = np.log(nonzero.astype(complex)) / L.dt
    mags = np.abs(poles)
    mags = mags[mags > 1e-9]
    lo = max(float(np.min(mags)) / 100.0, 1e-4) if mags.size else 1e-2
    hi = float(np.max(mags)) * 100.0 if mags.size else 1e4
    if L.dt is not None:
        hi = math.pi / L.dt
    lo = min(lo, hi / 1e3)
    count = max(int(POINTS_PER_DECADE * math.log10(hi / lo)), 200)
    return np.logspace(math.log10(lo), math.log10(hi), count)


def _siso(L: LinearSystem, omega: np.ndarray | float) -> np.ndarray:
    return L.frequency_response(np.atleast_1d(omega))[:, 0, 0]


def _roots(L: LinearSystem, omega: np.ndarray, values: np.ndarray, fun) -> list[float]:
    """Refined roots of fun(omega) between grid points where ``values`` changes sign."""
    out = []
    idx = np.nonzero(np.sign(values[:-1]) * np.sign(values[1:]) < 0)[0]
    for i in idx:
        a, b = omega[i], omega[i + 1]
        out.append(float(scipy.optimize.brentq(fun, a, b, xtol=1e-12 * b, rtol=1e-12)))
    return out


def loop_margins(L: LinearSystem, *, sample_rate: float, name: str, stable: bool = True) -> LoopMargins:
    """Gain, phase, delay and disk margins of one SISO loop transfer L (see the module docstring).

    Parameters
    ----------
    L : LinearSystem
        The loop transfer at the broken input (1 input, 1 output), negative-feedback convention.
    sample_rate : float
        Loop rate [Hz] used to express the delay margin in samples.
    name : str
        The input's name.
    stable : bool
        Whether the loop closed at k = 1 is stable (the caller knows it from the closed-loop poles).
    """
    omega = _frequency_grid(L)
    Lw = _siso(L, omega)

    def log_mag(w: float) -> float:
        return float(np.log(np.abs(_siso(L, w)[0])))

    def imag(w: float) -> float:
        return float(_siso(L, w)[0].imag)

    # Gain crossovers |L| = 1: phase and delay margins.
    gain_cross = _roots(L, omega, np.log(np.abs(Lw)), log_mag)
    pm, dm = math.inf, math.inf
    for w in gain_cross:
        phase = float(np.angle(_siso(L, w)[0]))
        pm = min(pm, abs(math.remainder(phase + math.pi, 2.0 * math.pi)))
        lag = (phase + math.pi) % (2.0 * math.pi)
        dm = min(dm, lag / w)
    # Phase crossovers (L real and negative): critical gain factors 1 / |L|.
    phase_cross = [w for w in _roots(L, omega, Lw.imag, imag) if _siso(L, w)[0].real < 0.0]
    critical = [1.0 / abs(_siso(L, w)[0]) for w in phase_cross]
    ends = []
    if not _pole_at_zero_frequency(L):
        ends.append(0.0)  # L(0) is finite and real: a real pole crosses at s = 0 (z = 1) at gain -1 / L(0)
    if L.dt is not None:
        ends.append(math.pi * sample_rate)  # L at z = -1 is real
    for w in ends:
        value = _siso(L, w)[0]
        if np.isfinite(value) and value.real < 0.0:
            critical.append(1.0 / abs(value))
            phase_cross.append(w)
    low = max([k for k in critical if k < 1.0], default=0.0)
    high = min([k for k in critical if k > 1.0], default=math.inf)
    # Disk margin: peak of |S - 1/2| on the grid, refined between the neighbours of the largest value.
    S = 1.0 / (1.0 + Lw)
    dev = np.abs(S - 0.5)
    j = int(np.argmax(dev))
    peak = float(dev[j])
    if 0 < j < omega.size - 1:
        res = scipy.optimize.minimize_scalar(lambda w: -abs(1.0 / (1.0 + _siso(L, w)[0]) - 0.5),
                                             bounds=(omega[j - 1], omega[j + 1]), method="bounded",
                                             options={"xatol": 1e-10 * omega[j]})
        peak = max(peak, -float(res.fun))
    for w in ends:  # the grid's open ends, where L is real
        value = _siso(L, w)[0]
        if np.isfinite(value):
            peak = max(peak, abs(1.0 / (1.0 + value) - 0.5))
    alpha = 1.0 / peak
    disk_gain = ((2.0 - alpha) / (2.0 + alpha), (2.0 + alpha) / (2.0 - alpha)) if alpha < 2.0 else (0.0, math.inf)
    delay_samples = dm * sample_rate
    return LoopMargins(
        input=name, gain_margin=(low, high), phase_margin_deg=math.degrees(pm), delay_margin_s=dm,
        delay_margin_samples=delay_samples, disk_margin=alpha, disk_gain_margin=disk_gain,
        disk_phase_margin_deg=math.degrees(2.0 * math.atan(alpha / 2.0)),
        sensitivity_peak=float(max(np.max(np.abs(S)), 0.0)),
        gain_crossover_hz=tuple(w / (2 * math.pi) for w in gain_cross),
        phase_crossover_hz=tuple(sorted(w / (2 * math.pi) for w in phase_cross)), stable=stable,
        flagged=bool(delay_samples < DELAY_MARGIN_MIN_SAMPLES),
    )


def _pole_at_zero_frequency(L: LinearSystem) -> bool:
    """Whether L has a pole at s = 0 (z = 1), where L(0) is infinite."""
    poles = L.poles
    if poles.size == 0:
        return False
    target = 0.0 if L.dt is None else 1.0
    scale = max(float(np.max(np.abs(poles))), 1.0)
    return bool(np.any(np.abs(poles - target) < 1e-9 * scale))


# ----------------------------------------------------------------------------------------------------------------
# Whole designs


def design_margins(design: BalanceDesign, *, discrete: bool, estimator: EstimatorDesign | None = None
                   ) -> MarginReport:
    """Loop-at-a-time margins of the continuous design (``discrete=False``), the discrete design with full state
    (``discrete=True``), or the discrete design running on ``estimator``'s estimate.

    Delays are expressed in samples of ``design.sample_rate`` for all three.
    """
    if discrete:
        C = None if estimator is None else measurement_matrix(design, estimator)
        plant, ctrl = discrete_plant(design, C), discrete_controller(design, estimator)
        label = "discrete" if estimator is None else "discrete_" + estimator.kind.replace("-", "_")
        stable = bool(np.max(np.abs(np.linalg.eigvals(closed_loop(plant, ctrl))), initial=0.0) < 1.0)
    else:
        if estimator is not None:
            raise ValueError("an estimator runs in discrete time; pass discrete=True")
        plant, ctrl = continuous_plant(design), continuous_controller(design)
        label = "continuous"
        stable = bool(np.max(np.linalg.eigvals(closed_loop(plant, ctrl)).real) < 0.0)
    loops = tuple(loop_margins(broken_loop(plant, ctrl, i), sample_rate=design.sample_rate, name=name,
                               stable=stable) for i, name in enumerate(design.input_names))
    flags = []
    if not stable:
        flags.append(f"{label}: the closed loop is unstable; its margins mean nothing")
    for lm in loops:
        if lm.flagged:
            flags.append(f"{label}: delay margin at the {lm.input} input is {lm.delay_margin_samples:.2f} samples "
                         f"({lm.delay_margin_s * 1e3:.3g} ms), under {DELAY_MARGIN_MIN_SAMPLES:g} samples: one "
                         "late sample or timing jitter can destabilize it; design a delay in "
                         "([balance].delay_samples), lower the weights, or raise the loop rate")
    return MarginReport(design=label, sample_rate=design.sample_rate, loops=loops, flags=tuple(flags))


def balance_margins(design: BalanceDesign, estimators: tuple[EstimatorDesign, ...] = ()) -> dict[str, MarginReport]:
    """Margins of the continuous design, the discrete design, and the discrete design with each estimator, keyed by
    ``continuous``, ``discrete``, ``discrete_kalman``, ``discrete_finite_difference``."""
    reports = [design_margins(design, discrete=False), design_margins(design, discrete=True)]
    reports += [design_margins(design, discrete=True, estimator=e) for e in estimators]
    return {r.design: r for r in reports}
