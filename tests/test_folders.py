"""Fresh output folders: published whole or not at all, never over an earlier one, with the usual permissions."""

from __future__ import annotations

import os
import stat

import pytest

from upswing.export.folders import stage_output


def test_finalize_sees_the_final_name_before_the_folder_appears(tmp_path):
    seen = {}

    def finalize(staging, final):
        seen["exists"] = final.exists()
        (staging / "summary.txt").write_text(str(final))

    with stage_output(tmp_path, "run", finalize=finalize) as staged:
        (staged.path / "a.txt").write_text("a")
    assert seen["exists"] is False  # the final name is chosen, not yet taken
    assert (staged.final_path / "summary.txt").read_text() == str(staged.final_path)
    assert sorted(p.name for p in staged.final_path.iterdir()) == ["a.txt", "summary.txt"]
    # Published with the permissions a new folder gets from the umask (mkdtemp's private 0700 is not kept).
    mask = os.umask(0o022)
    os.umask(mask)
    assert stat.S_IMODE(staged.final_path.stat().st_mode) == 0o777 & ~mask


def test_a_failing_finalize_leaves_nothing(tmp_path):
    def finalize(staging, final):
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError), stage_output(tmp_path, "run", finalize=finalize) as staged:
        (staged.path / "a.txt").write_text("a")
    assert list(tmp_path.iterdir()) == []


def test_a_second_folder_in_the_same_second_gets_a_new_name(tmp_path):
    paths = []
    for text in ("first", "second"):
        with stage_output(tmp_path, "run") as staged:
            (staged.path / "x.txt").write_text(text)
        paths.append(staged.final_path)
    assert paths[0] != paths[1]
    assert (paths[0] / "x.txt").read_text() == "first" and (paths[1] / "x.txt").read_text() == "second"
