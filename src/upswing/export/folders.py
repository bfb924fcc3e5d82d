"""Fresh output folders: a run never overwrites an earlier one and never leaves a half-written folder."""

from __future__ import annotations

import contextlib
import shutil
import tempfile
from collections.abc import Iterator
from datetime import datetime
from pathlib import Path

from upswing.errors import RequestError


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
def stage_output(parent: str | Path, stem: str) -> Iterator[StagedFolder]:
    """Yield a staging folder that becomes ``parent/<stem>-<YYYYmmdd-HHMMSS>[-n]`` when the block succeeds.

    Files are written into a hidden staging folder beside the destination and moved into place in one rename
    when the block finishes without an exception, so readers never see a half-written run and an earlier run is
    never overwritten. On an exception the staging folder is removed and nothing appears. The final path is set
    as ``final_path`` on the yielded :class:`StagedFolder`.

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
    except OSError as exc:
        raise RequestError(f"{parent}: cannot create the output folder ({exc.strerror or exc})") from None
    staged = StagedFolder(staging)
    try:
        yield staged
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    final = _fresh_name(parent, stem)
    staging.rename(final)
    staged.final_path = final
