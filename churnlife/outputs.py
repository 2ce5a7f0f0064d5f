"""Write an output folder atomically: everything goes into a temporary sibling folder, which
replaces the target only when complete. A failed or interrupted run leaves the previous folder as it
was, and no half-written folder."""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path

import polars as pl

from churnlife.errors import UserError


class OutputFolder:
    """A folder being written; ``path`` is the temporary location while open."""

    def __init__(self, path: Path) -> None:
        self.path = path

    def table(self, name: str, frame: pl.DataFrame, parquet: bool = True) -> None:
        """``name``.csv (and .parquet) from a polars frame."""
        frame.write_csv(self.path / f"{name}.csv")
        if parquet:
            frame.write_parquet(self.path / f"{name}.parquet")

    def text(self, name: str, content: str) -> None:
        (self.path / name).write_text(content, encoding="utf-8")


@contextlib.contextmanager
def atomic_folder(target: Path) -> Iterator[OutputFolder]:
    """Yield an ``OutputFolder`` in a temp sibling of ``target``; swap it in on success."""
    target = Path(target)
    parent = target.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.writing-", dir=parent))
    except OSError as err:
        raise UserError(
            f"cannot write the output folder {target}: {err.strerror}. Choose a folder you can "
            "write to with --output (or [output] folder in the config)."
        ) from None
    if target.exists() and not target.is_dir():
        shutil.rmtree(tmp, ignore_errors=True)
        raise UserError(f"output path {target} exists and is not a folder. Choose another path.")
    try:
        yield OutputFolder(tmp)
        old = None
        if target.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{target.name}.previous-", dir=parent))
            os.rmdir(old)
            os.replace(target, old)
        os.replace(tmp, target)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except OSError as err:
        shutil.rmtree(tmp, ignore_errors=True)
        raise UserError(
            f"writing the output folder {target} failed: {err.strerror or err}. Nothing was "
            "replaced; free disk space or choose another folder and run again."
        ) from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
