"""The reference C loop of examples/firmware against the verified batch engine.

examples/firmware/upswing_loop.c is an independent implementation of the documented contract: it was written from
the exported headers' comments and the ``swingup.csv`` law (u = u_ff[k] - K[k] (x - x_ref[k]), angle errors wrapped,
held, saturated at peak; hand-over on the balance cost-to-go with hysteresis; the balance loop and Kalman filter of
``balance_gains.h``; the reference-aided rate estimate the export header describes), using only the two exported
headers as they are. Here it is compiled with the strict flags of the balance-export test, fed the encoder readings
the Python :class:`~upswing.verification.swingup_control.CatchController` saw in a recorded nominal run of the batch
engine (simulated as :mod:`upswing.verification.manoeuvre` does), and its commands and modes are compared with the
engine's, sample by sample: built with double working precision (the logic, to round-off) and with float (the
firmware's arithmetic, IEEE 754 binary32, to a bound on float rounding). The other demo families (a cart with a
computation delay, two inputs, the pendubot) are compared the same way on made-up tables and readings, replayed open
loop. The stop conditions are checked against the rule :class:`~upswing.verification.supervision.Supervision` states
in words.
"""

from __future__ import annotations

import shutil
import subprocess
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pytest

from upswing.export.balance_files import balance_fields, write_balance_files
from upswing.export.swingup_files import write_swingup_files
from upswing.model.rig import load_rig
from upswing.synthesis.study import study_balance
from upswing.synthesis.swingup import plan_swingup
from upswing.synthesis.swingup.tracking import handover_rule, tvlqr_from_reference, tvlqr_from_samples
from upswing.verification.controllers import LinearFeedback
from upswing.verification.simulate import Bounds, SimulationSetup, simulate
from upswing.verification.supervision import Supervision, derive_supervision, joint_names
from upswing.verification.swingup_control import CatchController, tracking_law

GCC = shutil.which("gcc")
CFLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic"]
EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "firmware"
DEMO = Path(__file__).resolve().parents[1] / "src" / "upswing" / "demo" / "acrobot.toml"
SCENARIOS = Path(__file__).resolve().parents[1] / "scenarios"
HANDOVER_LEVEL = 80.0  # rho_in [-]: the nominal run reaches it about 0.9 s before the table ends (see below)
STALE_SAMPLES = 5  # a stale-reading threshold to exercise that stop (the demo's drop-out study gives 5 at 500 Hz)
TRACKING, BALANCING = 0, 1
STOP_CATCH_DEADLINE, STOP_SPEED, STOP_RAIL, STOP_STALE, STOP_BAD_READING, STOP_SEQUENCE = 16, 17, 18, 19, 20, 21

DRIVER = r"""
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include "upswing_loop.h"

/* One line per sample on stdin: the measured readings, or "-" (no fresh reading), or "skip" (t_index jumps).
 * One line per sample on stdout: status, commands, the cost-to-go level. */
int main(void)
{
    upswing_loop_state s;
    char line[512];
    long t = 0;
    int i;
    if (upswing_loop_init(&s) != 0) {
        return 2;
    }
    while (fgets(line, sizeof line, stdin) != NULL) {
        upswing_real reading[UPSWING_LOOP_N_MEASURED];
        upswing_real u[UPSWING_LOOP_N_INPUTS];
        const upswing_real *r = reading;
        upswing_loop_status st;
        char *p = line;
        if (strncmp(line, "skip", 4) == 0) {
            t += 1;
            continue;
        }
        if (line[0] == '-' && (line[1] == '\n' || line[1] == '\0')) {
            r = NULL;
        } else {
            for (i = 0; i < UPSWING_LOOP_N_MEASURED; ++i) {
                reading[i] = (upswing_real)strtod(p, &p);
            }
        }
        st = upswing_loop_step(&s, t, r, u);
        printf("%d", (int)st);
        for (i = 0; i < UPSWING_LOOP_N_INPUTS; ++i) {
            printf(" %.17g", (double)u[i]);
        }
        printf(" %.17g\n", (double)s.level);
        t += 1;
    }
    return 0;
}
"""


class LoggedController:
    """Pass-through around a controller that keeps what it saw and did in a one-rollout run: the readings y,
    the commands and the mode (CatchController keeps the mode in memory column 1)."""

    def __init__(self, inner: CatchController) -> None:
        self.inner = inner
        self.sample_rate, self.measurement = inner.sample_rate, inner.measurement
        self.y: list[np.ndarray] = []
        self.u: list[np.ndarray] = []
        self.mode: list[float] = []

    def start(self, y: np.ndarray) -> np.ndarray:
        return self.inner.start(y)

    def step(self, t: float, y: np.ndarray, memory: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        u, memory = self.inner.step(t, y, memory)
        self.y.append(np.array(y[0], dtype=float))
        self.u.append(np.array(u[0], dtype=float))
        self.mode.append(float(memory[0, 1]))
        return u, memory


@dataclass(frozen=True)
class Recorded:
    y: np.ndarray  # (K, p) readings minus upright, angles wrapped [rad]
    u: np.ndarray  # (K, m) the engine's requests [N m]
    mode: np.ndarray  # (K,) 1 while balancing
    handover_time: float  # [s]
    peak: np.ndarray  # (m,) [N m], as exported (float32)
    x_eq_measured: np.ndarray  # (p,) [rad]
    rate_gain: float  # largest |gain| on a rate in either table [N m s/rad]
    sample_rate: float  # [Hz]
    rows: int
    deadline: float  # catch deadline [s]
    exe: dict[str, Path]  # the driver built with float and with double working precision
    rho_in: float  # engage level [-], as exported
    rho_out: float  # release level [-], as exported


def _f32(a: np.ndarray) -> np.ndarray:
    """The values a float32 C table holds (as float64 numbers)."""
    return np.asarray(a, dtype=np.float32).astype(float)


def _run(exe: Path, lines: list[str]) -> np.ndarray:
    out = subprocess.run([str(exe)], input="\n".join(lines) + "\n", check=True, capture_output=True, text=True,
                         timeout=60).stdout
    return np.array([[float(v) for v in row.split()] for row in out.splitlines()])


def _reading_lines(rec: Recorded, y: np.ndarray) -> list[str]:
    return [" ".join(repr(float(v)) for v in row + rec.x_eq_measured) for row in y]


def _as_exported(rig, table, study, rule):
    """The designs with every number a header carries rounded to float32, and the balance loop built from them.

    The C loop reads float32 numbers; the engine runs here with the same numbers, so that what is left between the
    two is the arithmetic alone: double in the engine, the C loop's working precision. The LinearFeedback is what
    :func:`upswing.verification.controllers.balance_controller` builds, from the rounded design."""
    table = replace(table, t=_f32(table.t), x_ref=_f32(table.x_ref), u_ff=_f32(table.u_ff), K=_f32(table.K),
                    peak=_f32(table.peak))
    k = study.kalman
    kalman = replace(k, F=_f32(k.F), G=_f32(k.G), H=_f32(k.H), Cxi=_f32(k.Cxi), Dy=_f32(k.Dy))
    d = study.design
    design = replace(d, K_discrete=_f32(d.K_discrete), K=_f32(d.K), x_eq=_f32(d.x_eq), u_eq=_f32(d.u_eq))
    study = replace(study, design=design, kalman=kalman)
    rule = replace(rule, P=_f32(rule.P), x_eq=_f32(rule.x_eq), rho_in=float(np.float32(rule.rho_in)),
                   rho_out=float(np.float32(rule.rho_out)))
    balance = LinearFeedback(design.K_discrete, design.u_eq, _f32(rig.peak_inputs), design.sample_rate,
                             design.delay_samples, kalman)
    return table, study, rule, balance


def _build(folder: Path, rig) -> dict[str, Path]:
    """Compile the driver and the reference loop against the headers in ``folder``, in float and in double."""
    driver = folder / "driver.c"
    driver.write_text(DRIVER)
    # no -DUPSWING_LOOP_RATE_CUTOFF_HZ: the cut-off must come from the header's UPSWING_SWINGUP_RATE_CUTOFF_HZ
    header = (folder / "swingup_table.h").read_text()
    assert f"#define UPSWING_SWINGUP_RATE_CUTOFF_HZ {float(rig.swingup.tracking_rate_cutoff)!r}" in header.replace(
        "f\n", "\n")
    exe = {}
    for real in ("float", "double"):
        exe[real] = folder / f"driver_{real}"
        build = subprocess.run([GCC, *CFLAGS, f"-DUPSWING_LOOP_REAL={real}", "-I", str(folder), "-I",
                                str(EXAMPLE), str(driver), str(EXAMPLE / "upswing_loop.c"), "-o", str(exe[real]),
                                "-lm"], capture_output=True, text=True)
        assert build.returncode == 0, build.stderr  # warning-free under -Wall -Wextra -Werror -pedantic
    return exe


@pytest.fixture(scope="module")
def recorded(tmp_path_factory) -> Recorded:
    if GCC is None:
        pytest.skip("gcc is not installed: the reference C loop cannot be compiled")
    rig = load_rig(DEMO)
    plan = plan_swingup(rig)  # ~1.5 s
    table = tvlqr_from_reference(rig, plan.sample, plan.duration)
    study = study_balance(rig)
    # A narrow band (rho_out = 1.5 rho_in, the default was 1.5 until it was measured to let runs alternate) so that
    # the nominal run exercises the release branch too; the C loop must follow whatever band the header carries.
    rule = handover_rule(rig, HANDOVER_LEVEL, release_factor=1.5)
    table, study, rule, balance = _as_exported(rig, table, study, rule)
    design, kalman, peak = study.design, study.kalman, balance.peak
    log = LoggedController(CatchController(rig, tracking_law(table), balance, rule, table.end_time, reference=table))
    # The nominal run as verification/manoeuvre.py simulates it: encoders (rounding and noise), record=True.
    run = simulate(rig, log, plan.start[None, :], setup=SimulationSetup(
        horizon=table.end_time + 1.0, delay_samples=design.delay_samples, bounds=Bounds(angle=None),
        record=True), seed=0, stream=6)
    assert run.held[0] and log.inner.balancing_at_end[0]  # the run being compared is a successful catch
    n_q = rig.n_states // 2
    peak_speed = np.max(np.abs(run.states[:, 0, n_q:]), axis=0)
    # Stop conditions derived from this one run (a single run is its own check, supervision.py), plus a
    # stale-reading threshold so that every stop macro of a fixed-base rig is in the header.
    sup = derive_supervision(rig, caught=np.array([True]), level_times=np.array([log.inner.level_time[0]]),
                             peak_speed=peak_speed[None, :], peak_rail=np.zeros(1), duration=plan.duration,
                             catch_level=rule.rho_in)
    sup = replace(sup, stale_reading_samples=STALE_SAMPLES, stale_reading_ms=STALE_SAMPLES * 1e3 / table.sample_rate)

    folder = tmp_path_factory.mktemp("firmware")
    write_balance_files(folder, rig, study, balance_fields(rig, study))
    files = write_swingup_files(folder, rig, table, handover=rule, supervision=sup)
    assert files.c_header is not None, files.note
    exe = _build(folder, rig)

    n = rig.n_states
    rate_gain = max(float(np.max(np.abs(table.K[:, :, n_q:]))), float(np.max(np.abs(design.K_discrete[:, n_q:n]))))
    return Recorded(y=np.array(log.y), u=np.array(log.u), mode=np.array(log.mode),
                    handover_time=float(log.inner.handover_time[0]), peak=peak,
                    x_eq_measured=design.x_eq[:len(kalman.measured)], rate_gain=rate_gain,
                    sample_rate=table.sample_rate, rows=table.n_rows, deadline=sup.catch_deadline, exe=exe,
                    rho_in=rule.rho_in, rho_out=rule.rho_out)


# Tolerances. The engine computes in double (unit round-off u = 2^-53 ~ 1.1e-16), the C loop in float (u = 2^-24 ~
# 6e-8; IEEE 754-2008 binary32) or, for the logic check, in double; both read the same float32 tables. Rounding a
# reading (|y| <= pi rad) costs up to pi u rad; the rate estimates difference two readings and multiply by the sample
# rate, so their error is up to 2 pi u f_s rad/s (the low-pass has unit DC gain), and the rate gains multiply it.
# Factor 2: headroom for the Kalman filter after the hand-over, whose estimate is also built from differences of
# readings but is not bounded separately here. Plus eight round-offs of a command of at most the peak. On the demo
# acrobot: double build 1.3e-11 N m (measured 8.7e-13); float build 7.2e-3 N m, 0.4 % of the 1.9 N m peak
# (measured 9.6e-5 while tracking, 1e-5 while balancing).
def _tolerance(sample_rate: float, rate_gain: float, peak: np.ndarray, unit_roundoff: float) -> float:
    return 2 * (2 * np.pi * unit_roundoff * sample_rate) * rate_gain + 8 * unit_roundoff * float(np.max(peak))


ROUNDOFF = {"double": 2.0 ** -53, "float": 2.0 ** -24}


@pytest.mark.parametrize("real", ["double", "float"])
def test_c_loop_reproduces_the_engine_commands_and_handover(recorded, real):
    rec = recorded
    out = _run(rec.exe[real], _reading_lines(rec, rec.y))
    status, u_c = out[:, 0].astype(int), out[:, 1:-1]
    assert out.shape[0] == rec.y.shape[0]
    # No stop condition trips on the run they were derived from (the windows sit 15 % above its peaks).
    assert set(status) <= {TRACKING, BALANCING}
    # Same mode at every sample, hence the same hand-over sample; it happens on the level, before the table ends.
    assert np.array_equal(status, rec.mode.astype(int))
    handover = int(np.argmax(status == BALANCING))
    assert handover == round(rec.handover_time * rec.sample_rate)
    assert handover < rec.rows
    # The run covers every branch of the hand-over rule: balance engages, releases (level > rho_out) and engages
    # again (a fresh seed of the Kalman filter) before the table ends, and holds through levels between rho_in and
    # rho_out (hysteresis).
    level, before = out[:, -1], np.r_[TRACKING, status[:-1]]
    assert np.sum((before == BALANCING) & (status == TRACKING)) >= 1
    assert np.any((before == BALANCING) & (status == BALANCING) & (level > rec.rho_in) & (level <= rec.rho_out))
    # The engine sends its request unclamped and lets the drive clamp at peak (controllers.py); compare clamped.
    u_py = np.clip(rec.u, -rec.peak, rec.peak)
    tol = _tolerance(rec.sample_rate, rec.rate_gain, rec.peak, ROUNDOFF[real])
    err = np.abs(u_c - u_py)
    assert float(err.max()) <= tol, (float(err.max()), tol, int(np.argmax(err.max(axis=1))))


def test_c_loop_stops_on_each_condition(recorded):
    rec = recorded
    lines = _reading_lines(rec, rec.y)
    # Stale reading: STALE_SAMPLES samples in a row without a fresh reading stop the drive at the last of them
    # (Supervision.rule: "no fresh encoder reading has arrived for ... control samples"); one fewer does not.
    k0 = 300
    out = _run(rec.exe["float"], lines[:k0] + ["-"] * (STALE_SAMPLES - 1) + lines[k0 + STALE_SAMPLES - 1:k0 + 50])
    assert set(out[:, 0].astype(int)) <= {TRACKING, BALANCING}
    out = _run(rec.exe["float"], lines[:k0] + ["-"] * STALE_SAMPLES + lines[k0 + STALE_SAMPLES:k0 + 50])
    first = int(np.argmax(out[:, 0] >= 16))
    assert first == k0 + STALE_SAMPLES - 1 and out[first, 0] == STOP_STALE
    assert np.all(out[first:, 0] == STOP_STALE) and np.all(out[first:, 1:-1] == 0.0)  # latched, zero command
    # Catch deadline: the links left hanging at rest never reach rho_in; the stop comes at the first sample after
    # the deadline (Supervision.rule: "has not come down to rho_in by <deadline> s after the start").
    hanging = rec.x_eq_measured + np.array([np.pi, 0.0])
    steps = int(np.ceil(rec.deadline * rec.sample_rate)) + 5
    out = _run(rec.exe["float"], [" ".join(repr(float(v)) for v in hanging)] * steps)
    first = int(np.argmax(out[:, 0] >= 16))
    assert out[first, 0] == STOP_CATCH_DEADLINE
    assert first / rec.sample_rate > rec.deadline >= (first - 1) / rec.sample_rate
    # Speed window: a reading that jumps 0.5 rad between two samples is an elbow speed far above its window.
    jumped = rec.y[:k0 + 1].copy()
    jumped[k0, 1] += 0.5
    out = _run(rec.exe["float"], _reading_lines(rec, jumped))
    assert out[-1, 0] == STOP_SPEED and np.all(out[:-1, 0] < 16)
    # A non-finite reading and a lost sample (t_index not previous + 1) stop at once.
    out = _run(rec.exe["float"], lines[:10] + ["nan " * len(rec.x_eq_measured)])
    assert out[-1, 0] == STOP_BAD_READING
    out = _run(rec.exe["float"], lines[:10] + ["skip"] + lines[11:12])
    assert out[-1, 0] == STOP_SEQUENCE


@pytest.mark.skipif(GCC is None, reason="gcc is not installed: the reference C loop cannot be compiled")
@pytest.mark.parametrize(("name", "delay", "rho_in"), [
    ("cart-double", 1, 1e-9),  # a cart (position not wrapped, rail window), a computation delay; engages at the end
    ("arm-2dof", 0, 1e12),  # two inputs; the level is met at once, so balance engages at the first sample
    ("pendubot", 0, 1e-9),
])
def test_c_loop_matches_the_engine_on_other_rigs(tmp_path, name, delay, rho_in):
    """The other demo families, with a short made-up table near upright and made-up readings, replayed open loop
    through the engine's controller (its commands do not feed back into these readings)."""
    text = (SCENARIOS / f"{name}.toml").read_text()
    if delay:
        text = text.replace("[balance]\n", f"[balance]\ndelay_samples = {delay}\n")
    source = tmp_path / f"{name}.toml"
    source.write_text(text)
    rig = load_rig(source)
    n, m, rows = rig.n_states, rig.n_inputs, 30
    rate = rig.balance.sample_rate
    rng = np.random.default_rng(3)
    table = tvlqr_from_samples(rig, np.arange(rows) / rate, rng.normal(scale=0.05, size=(rows, n)),
                               rng.normal(scale=0.1, size=(rows, m)))
    table, study, rule, balance = _as_exported(rig, table, study_balance(rig), handover_rule(rig, rho_in))
    assert study.design.delay_samples == delay
    # Stop windows wide enough not to trip on these readings (the rail window is the rig's travel).
    sup = Supervision(catch_level=rule.rho_in, catch_deadline=100.0,
                      speed_limits=tuple((j, 1e3, "m/s" if j == "cart" else "rad/s") for j in joint_names(rig)),
                      rail_limit=None if rig.cart is None else rig.cart.travel, derived_from=1, checked_on=1,
                      false_trips=0, missed=0, missed_stopped=0)
    write_balance_files(tmp_path, rig, study, balance_fields(rig, study))
    assert write_swingup_files(tmp_path, rig, table, handover=rule, supervision=sup).c_header is not None
    exe = _build(tmp_path, rig)
    # Readings: the reference plus noise while the table runs, then small noise about upright.
    p = len(study.kalman.measured)
    y = np.vstack([table.x_ref[:, :p], np.zeros((30, p))]) + rng.normal(scale=0.01, size=(rows + 30, p))
    ctrl = CatchController(rig, tracking_law(table), balance, rule, table.end_time, reference=table)
    memory = ctrl.start(y[:1])
    u_py, mode_py = [], []
    for k in range(y.shape[0]):
        request, memory = ctrl.step(k * (1.0 / rate), y[k:k + 1], memory)
        u_py.append(np.clip(request[0], -balance.peak, balance.peak))
        mode_py.append(int(memory[0, 1]))
    u_py, mode_py = np.array(u_py), np.array(mode_py)
    assert mode_py[0] == (BALANCING if rho_in > 1.0 else TRACKING) and mode_py[-1] == BALANCING
    x_eq = study.design.x_eq[:p]
    lines = [" ".join(repr(float(v)) for v in row + x_eq) for row in y]
    n_q = n // 2
    rate_gain = max(float(np.max(np.abs(table.K[:, :, n_q:]))),
                    float(np.max(np.abs(study.design.K_discrete[:, n_q:n]))))
    for real in ("double", "float"):
        out = _run(exe[real], lines)
        assert np.array_equal(out[:, 0].astype(int), mode_py)
        assert float(np.max(np.abs(out[:, 1:-1] - u_py))) <= _tolerance(rate, rate_gain, balance.peak, ROUNDOFF[real])
    if rig.cart is not None:  # the cart past its rail window stops the loop
        beyond = y[-1].copy()
        beyond[study.kalman.measured.index("x")] = rig.cart.travel + 0.01
        out = _run(exe["float"], lines + [" ".join(repr(float(v)) for v in beyond + x_eq)])
        assert out[-1, 0] == STOP_RAIL and np.all(out[:-1, 0] < 16)
