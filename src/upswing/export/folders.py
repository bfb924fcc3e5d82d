"""Fresh output folders: a run never overwrites an earlier one and never leaves a half-written folder."""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Callable, Iterator
from datetime import datetime
from pathlib import Path

from upswing.errors import RequestError


def _umask() -> int:
    mask = os.umask(0o022)  # reading the umask means setting it; put it straight back
    os.umask(mask)
    return mask


def _fresh_name(parent: Path, stem: str) -> Path:
    stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
    candidate = parent / f"{stem}-{stamp}"
    n = 2
    while candidate.exists():
        candidate = parent / f"{stem}-{stamp}-{n}"
        n += 1
    return candidate


class StagedFolder:
    """A staging folder and, once committed, its final path."""

    def __init__(self, path: Path) -> None:
        self.path = path
        self.final_path: Path | None = None


@contextlib.contextmanager
def stage_output(parent: str | Path, stem: str, *,
                 finalize: Callable[[Path, Path], None] | None = None) -> Iterator[StagedFolder]:
    """Yield a staging folder that becomes ``parent/<stem>-<YYYYmmdd-HHMMSS>[-n]`` when the block succeeds.

    Files are written into a hidden staging folder beside the destination and moved into place in one rename
    when the block finishes without an exception, so readers never see a half-written run and an earlier run is
    never overwritten. On an exception the staging folder is removed and nothing appears. The final path is set
    as ``final_path`` on the yielded :class:`StagedFolder`.

    Parameters
    ----------
    finalize : callable (staging, final) -> None, optional
        Called after the block, once the final name is chosen and before the rename, with the staging folder and
        the path it is about to become: the place to write files that must name their own folder (a summary
        with its ``run_folder``). If it raises, the staging folder is removed as for the block.

    Raises
    ------
    RequestError
        When ``parent`` exists but is not a folder, or cannot be created.
    """
    parent = Path(parent)
    if parent.exists() and not parent.is_dir():
        raise RequestError(f"{parent}: output location exists and is not a folder")
    try:
        parent.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(prefix=f".{stem}-partial-", dir=parent))
        staging.chmod(0o777 & ~_umask())  # mkdtemp makes it private (0700); a published run gets the usual mode
    except OSError as exc:
        raise RequestError(f"{parent}: cannot create the output folder ({exc.strerror or exc})") from None
    staged = StagedFolder(staging)
    try:
        yield staged
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    final = _fresh_name(parent, stem)
    if finalize is not None:
        try:
            finalize(staging, final)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise
    staging.rename(final)
    staged.final_path = final
