"""Exported balance files: the C header compiles and reproduces the JSON gains; CSV and header blocks."""

from __future__ import annotations

import argparse
import csv
import hashlib
import io
import json
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from balance_helpers import SCENARIOS, rig_text

from upswing import __version__
from upswing.commands import balance as balance_command
from upswing.export.balance_files import C_HEADER_NAME, EQUILIBRIUM_CSV_NAME, GAINS_CSV_NAME, JSON_NAME, c_float
from upswing.export.header import c_comment, export_header, hash_comment
from upswing.export.jsonable import dumps
from upswing.model.rig import load_rig

GCC = shutil.which("gcc")
CFLAGS = ["-std=c99", "-Wall", "-Wextra", "-Werror", "-pedantic"]
CAUTION_WORDS = ("reduced actuator limits", "emergency stop within reach")


def _export(tmp_path: Path, name: str, delay: int = 0) -> tuple[Path, dict]:
    """Run ``upswing balance RIG --export DIR`` in-process; return the folder and the JSON the command printed."""
    text = rig_text(name)
    if delay:
        text = text.replace("[balance]\n", f"[balance]\ndelay_samples = {delay}\n")
    source = tmp_path / f"{name}.toml"
    source.write_text(text)
    outcome = balance_command.run(argparse.Namespace(rig=source, export=str(tmp_path / "out"), schedule=None,
                                                     json=True))
    data = json.loads(dumps(outcome.data))
    folder = Path(data["export_folder"])
    assert json.loads((folder / JSON_NAME).read_text())["K_discrete"] == data["K_discrete"]
    return folder, data


def _c_program(n: int, m: int, p: int, d: int, e: list[float], ys: list[list[float]], us: list[list[float]]) -> str:
    """A tiny firmware-like program: print the gains, one control step, and a few Kalman filter steps."""
    def arr(v):
        return "{" + ", ".join(f"{x!r}f" if "." in repr(x) or "e" in repr(x) else f"{x}.0f" for x in v) + "}"
    ys_c = ", ".join(arr(y) for y in ys)
    us_c = ", ".join(arr(u) for u in us)
    return f"""
#include <stdio.h>
#include "balance_gains.h"
int main(void) {{
    int i, j, k, s;
    const float z[UPSWING_BALANCE_N_GAIN_COLUMNS] = {arr(e + [0.0] * (d * m))};
    const float ys[{len(ys)}][UPSWING_BALANCE_N_MEASURED] = {{{ys_c}}};
    const float us[{len(us)}][UPSWING_BALANCE_N_INPUTS] = {{{us_c}}};
    float xi[UPSWING_BALANCE_KF_N_XI] = {{0}};
    float next[UPSWING_BALANCE_KF_N_XI];
    if (UPSWING_BALANCE_N_STATES != {n} || UPSWING_BALANCE_N_INPUTS != {m} || UPSWING_BALANCE_N_MEASURED != {p})
        return 1;
    for (i = 0; i < UPSWING_BALANCE_N_INPUTS; ++i)
        for (j = 0; j < UPSWING_BALANCE_N_GAIN_COLUMNS; ++j)
            printf("K %d %d %.9g\\n", i, j, (double)upswing_balance_K_discrete[i][j]);
    for (i = 0; i < UPSWING_BALANCE_N_STATES; ++i) printf("x_eq %d %.9g\\n", i, (double)upswing_balance_x_eq[i]);
    for (i = 0; i < UPSWING_BALANCE_N_INPUTS; ++i) {{
        float u = upswing_balance_u_eq[i];
        for (j = 0; j < UPSWING_BALANCE_N_GAIN_COLUMNS; ++j) u -= upswing_balance_K_discrete[i][j] * z[j];
        printf("u %d %.9g\\n", i, (double)u);
    }}
    for (s = 0; s < {len(ys)}; ++s) {{
        for (i = 0; i < UPSWING_BALANCE_N_STATES; ++i) {{
            float x_hat = 0.0f;
            for (k = 0; k < UPSWING_BALANCE_KF_N_XI; ++k) x_hat += upswing_balance_kf_Cxi[i][k] * xi[k];
            for (k = 0; k < UPSWING_BALANCE_N_MEASURED; ++k) x_hat += upswing_balance_kf_Dy[i][k] * ys[s][k];
            printf("xhat %d %d %.9g\\n", s, i, (double)x_hat);
        }}
        for (i = 0; i < UPSWING_BALANCE_KF_N_XI; ++i) {{
            next[i] = 0.0f;
            for (k = 0; k < UPSWING_BALANCE_KF_N_XI; ++k) next[i] += upswing_balance_kf_F[i][k] * xi[k];
            for (k = 0; k < UPSWING_BALANCE_N_MEASURED; ++k) next[i] += upswing_balance_kf_G[i][k] * ys[s][k];
            for (k = 0; k < UPSWING_BALANCE_N_INPUTS; ++k) next[i] += upswing_balance_kf_H[i][k] * us[s][k];
        }}
        for (i = 0; i < UPSWING_BALANCE_KF_N_XI; ++i) xi[i] = next[i];
    }}
    (void)UPSWING_BALANCE_LOOP_PERIOD_S;
    return 0;
}}
"""


@pytest.mark.skipif(GCC is None, reason="gcc is not installed")
@pytest.mark.parametrize(("name", "delay"), [("acrobot", 0), ("cart-double", 1), ("arm-2dof", 0)])
def test_c_header_compiles_and_reproduces_the_json(tmp_path, name, delay):
    folder, data = _export(tmp_path, name, delay)
    # The header alone, included by an empty program, under the flags the issue names (plus -pedantic).
    empty = tmp_path / "empty.c"
    empty.write_text(f'#include "{C_HEADER_NAME}"\nint main(void) {{ return 0; }}\n')
    subprocess.run([GCC, *CFLAGS, "-I", str(folder), str(empty), "-o", str(tmp_path / "empty")], check=True,
                   capture_output=True, text=True)
    K = np.array(data["K_discrete"])
    m, cols = K.shape
    n = len(data["state"])
    est = data["estimators"]["kalman"]
    p = len(est["measured"])
    rng = np.random.default_rng(11)
    e = [float(v) for v in np.round(rng.normal(size=n) * 0.01, 6)]
    ys = [[float(v) for v in np.round(rng.normal(size=p) * 1e-3, 7)] for _ in range(5)]
    us = [[float(v) for v in np.round(rng.normal(size=m) * 0.1, 6)] for _ in range(5)]
    prog = tmp_path / "prog.c"
    prog.write_text(_c_program(n, m, p, delay, e, ys, us))
    exe = tmp_path / "prog"
    subprocess.run([GCC, *CFLAGS, "-I", str(folder), str(prog), "-o", str(exe)], check=True, capture_output=True,
                   text=True)
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True).stdout.split("\n")
    got = {}
    for line in filter(None, out):
        tag, *idx, value = line.split()
        got[(tag, *map(int, idx))] = float(value)
    # Gains: float32 keeps 24 bits, so each entry matches the JSON double to 2^-24 relative (6e-8); 1.2e-7 allows
    # the decimal round trip.
    for i in range(m):
        for j in range(cols):
            assert got[("K", i, j)] == pytest.approx(K[i, j], rel=1.2e-7, abs=1e-30)
    assert [got[("x_eq", i)] for i in range(n)] == pytest.approx(data["x_eq"], abs=1e-30)
    # One control step u = u_eq - K z: float32 sums of a few products, error <= ~n * 6e-8 * sum |K z|.
    z = np.array(e + [0.0] * (delay * m))
    u = np.array(data["u_eq"]) - K @ z
    scale = np.abs(K) @ np.abs(z)
    for i in range(m):
        assert abs(got[("u", i)] - u[i]) <= 1e-6 * scale[i]
    # Five Kalman filter steps in the runtime form x_hat = Cxi xi + Dy y, xi+ = F xi + G y + H u, in double here.
    F, G, H, Cxi, Dy = (np.array(est[k]) for k in ("F", "G", "H", "Cxi", "Dy"))
    xi = np.zeros(F.shape[0])
    for s in range(5):
        x_hat = Cxi @ xi + Dy @ np.array(ys[s])
        for i in range(n):
            # Float32 through a few multiply-adds over 5 steps of a stable filter: 1e-5 of the estimate's scale.
            bound = 1e-5 * (np.abs(Cxi[i]) @ np.abs(xi) + np.abs(Dy[i]) @ np.abs(ys[s]) + 1e-12)
            assert abs(got[("xhat", s, i)] - x_hat[i]) <= bound
        xi = F @ xi + G @ np.array(ys[s]) + H @ np.array(us[s])


def test_header_block_in_every_export(tmp_path):
    folder, data = _export(tmp_path, "pendubot")
    digest = hashlib.sha256((tmp_path / "pendubot.toml").read_bytes()).hexdigest()
    for name in (GAINS_CSV_NAME, EQUILIBRIUM_CSV_NAME, C_HEADER_NAME):
        text = (folder / name).read_text()
        assert digest in text
        assert f"upswing {__version__}" in text
        assert "u = u_eq - K (x - x_eq)" in text
        assert all(w in text for w in CAUTION_WORDS)
        assert "ISO 13850" in text and "Local codes" in text
    stored = json.loads((folder / JSON_NAME).read_text())
    assert stored["export_header"]["rig"]["content_hash"] == digest == data["rig"]["content_hash"]
    assert all(w in stored["export_header"]["caution"] for w in CAUTION_WORDS)


def test_gains_csv_holds_the_json_gains(tmp_path):
    folder, data = _export(tmp_path, "cart-double", delay=2)
    rows = [r for r in csv.reader(io.StringIO((folder / GAINS_CSV_NAME).read_text())) if not r[0].startswith("#")]
    header, body = rows[0], rows[1:]
    assert header[:3] == ["matrix", "input", "input_unit"]
    assert header[3:] == data["state"] + ["cart[k-2]", "cart[k-1]"]
    kd = [r for r in body if r[0] == "K_discrete"]
    assert [float(v) for v in kd[0][3:]] == data["K_discrete"][0]  # repr round-trips doubles exactly
    k = [r for r in body if r[0] == "K"]
    assert [float(v) for v in k[0][3:9]] == data["K"][0] and k[0][9:] == ["", ""]
    eq = [r for r in csv.reader(io.StringIO((folder / EQUILIBRIUM_CSV_NAME).read_text()))
          if not r[0].startswith("#")]
    assert eq[0] == ["quantity", "kind", "unit", "value"]
    assert [float(r[3]) for r in eq[1:] if r[1] == "x_eq"] == data["x_eq"]
    assert [r[3] for r in eq[1:] if r[1] == "u_peak"] == ["32.0"]


def test_header_renderers_are_generic_and_safe():
    r = load_rig(SCENARIOS / "acrobot.toml")
    h = export_header(r, "a trajectory */ with a comment closer", units=[("time", "s")],
                      notes=["knot count 101"])
    text = c_comment(h)
    assert text.startswith("/*\n") and text.endswith(" */\n")
    assert text.count("*/") == 1  # the title's closer is defused, the block's own remains
    lines = hash_comment(h).splitlines()
    assert all(line.startswith("# ") for line in lines)
    assert any("time [s]" in line for line in lines) and lines[-1] == "# knot count 101"


def test_c_float_literals_round_trip():
    for v in (0.0, 1.0, -3.0, 1e-5, 123456789.0, -2.5e-30):
        lit = c_float(v)
        assert lit.endswith("f") and ("e" in lit)
        assert np.float32(float(lit[:-1])) == np.float32(v)
    with pytest.raises(ValueError):
        c_float(float("nan"))
