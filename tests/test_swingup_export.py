"""swingup.csv, swingup.json and the C header of the swing-up table."""

from __future__ import annotations

import io
import json
import shutil
import subprocess

import numpy as np
import pytest

from upswing import __version__
from upswing.errors import RequestError
from upswing.export.swingup_files import (
    C_HEADER_NAME,
    CSV_NAME,
    JSON_NAME,
    c_table_bytes,
    csv_columns,
    write_swingup_files,
)
from upswing.model.rig import load_rig
from upswing.safety import STANDARDS
from upswing.synthesis.swingup.tracking import tvlqr_from_samples


def _table(name="acrobot", N=12):
    rig = load_rig(f"scenarios/{name}.toml")
    rate = rig.balance.sample_rate
    rng = np.random.default_rng(7)
    x_ref = rng.normal(scale=0.05, size=(N, rig.n_states))  # near upright, any values serve the layout checks
    u_ff = rng.normal(scale=0.1, size=(N, rig.n_inputs))
    return rig, tvlqr_from_samples(rig, 0.25 + np.arange(N) / rate, x_ref, u_ff)


@pytest.mark.parametrize("name", ["acrobot", "cart-double"])
def test_csv_layout_is_the_issue_contract(tmp_path, name):
    rig, table = _table(name)
    files = write_swingup_files(tmp_path, rig, table)
    text = files.csv.read_text()
    lines = text.splitlines()
    comments = [ln for ln in lines if ln.startswith("#")]
    body = [ln for ln in lines if not ln.startswith("#")]
    assert lines[:len(comments)] == comments  # the comment block comes first
    # Issue 5: columns t, the state names, the input names, then K_<input>_<state> for every gain entry.
    expected = ["t", *rig.state_names, *rig.input_names,
                *[f"K_{u}_{s}" for u in rig.input_names for s in rig.state_names]]
    assert body[0].split(",") == expected == csv_columns(table)
    assert len(body) == 1 + table.n_rows  # one row per controller sample
    data = np.loadtxt(io.StringIO("\n".join(body[1:])), delimiter=",")
    n, m = rig.n_states, rig.n_inputs
    assert np.array_equal(data[:, 0], table.t)  # shortest round-trip repr: exact
    assert np.array_equal(data[:, 1:1 + n], table.x_ref)
    assert np.array_equal(data[:, 1 + n:1 + n + m], table.u_ff)
    assert np.array_equal(data[:, 1 + n + m:].reshape(table.K.shape), table.K)
    header = "\n".join(comments)
    assert rig.content_hash and rig.content_hash in header
    assert f"upswing {__version__}" in header
    assert "u = u_ff[k] - K[k] (x - x_ref[k])" in header and "balance controller takes over" in header
    assert all(number in header for number in STANDARDS)
    assert "Local codes" in header


def test_json_is_the_same_table(tmp_path):
    rig, table = _table()
    files = write_swingup_files(tmp_path, rig, table)
    obj = json.loads(files.json.read_text())
    assert obj["state"] == list(rig.state_names) and obj["inputs"] == list(rig.input_names)
    assert obj["rig"]["content_hash"] == rig.content_hash
    assert np.array_equal(np.array(obj["K"]), table.K)
    assert np.array_equal(np.array(obj["x_ref"]), table.x_ref)
    assert obj["rows"] == table.n_rows and obj["sample_rate"] == table.sample_rate
    assert obj["cautions"] and obj["units"]["inputs"] == ["N m"]


@pytest.mark.skipif(shutil.which("gcc") is None, reason="gcc is not installed")
def test_c_header_compiles_and_reads_back_a_gain(tmp_path):
    rig, table = _table("cart-double")
    files = write_swingup_files(tmp_path, rig, table)
    assert files.c_header == tmp_path / C_HEADER_NAME
    k, i, j = 7, 0, 2
    (tmp_path / "data.c").write_text(f'#define UPSWING_SWINGUP_TABLE_DEFINE\n#include "{C_HEADER_NAME}"\n')
    (tmp_path / "main.c").write_text(f"""#include <stdio.h>
#include "{C_HEADER_NAME}"
int main(void)
{{
    printf("%d %d %d %.9g %.9g\\n", UPSWING_SWINGUP_ROWS, UPSWING_SWINGUP_STATES, UPSWING_SWINGUP_INPUTS,
           (double)upswing_swingup_K[{k}][{i}][{j}], (double)UPSWING_SWINGUP_SAMPLE_RATE_HZ);
    return 0;
}}
""")
    exe = tmp_path / "readback"
    # The flags the issue names: C99, all warnings, warnings are errors.
    subprocess.run(["gcc", "-std=c99", "-Wall", "-Wextra", "-Werror", "-o", str(exe), "main.c", "data.c"],
                   cwd=tmp_path, check=True, capture_output=True, timeout=120)
    out = subprocess.run([str(exe)], check=True, capture_output=True, text=True, timeout=30).stdout.split()
    assert [int(v) for v in out[:3]] == [table.n_rows, rig.n_states, rig.n_inputs]
    # IEEE 754 single precision (the header's storage type): the value printed with 9 digits is the float32 one
    assert np.float32(float(out[3])) == np.float32(table.K[k, i, j])
    assert float(out[4]) == table.sample_rate


def test_c_header_respects_the_memory_budget(tmp_path):
    rig, table = _table("acrobot", N=20)
    need = c_table_bytes(table)
    assert need == 4 * (20 * (4 + 1 + 4) + 1)  # single-precision floats: x_ref, u_ff, K per row, plus peak
    files = write_swingup_files(tmp_path, rig, table, c_budget_bytes=need - 1)
    assert files.c_header is None and str(need) in files.note
    assert not (tmp_path / C_HEADER_NAME).exists()
    assert (tmp_path / CSV_NAME).exists() and (tmp_path / JSON_NAME).exists()  # the tables are still written


def test_export_refuses_a_table_of_another_rig(tmp_path):
    _, table = _table("acrobot")
    with pytest.raises(RequestError, match="rig it was made for"):
        write_swingup_files(tmp_path, load_rig("scenarios/cart-double.toml"), table)
