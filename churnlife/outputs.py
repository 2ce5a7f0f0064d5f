"""Write an output folder atomically: everything goes into a temporary sibling folder, which
replaces the target only when complete. A failed or interrupted run leaves the previous folder as it
was, and no half-written folder."""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import tempfile
import threading
from collections.abc import Iterator
from pathlib import Path
from types import FrameType

import polars as pl

from churnlife.errors import InterruptedAfterWrite, UserError


class OutputFolder:
    """A folder being written; ``path`` is the temporary location while open."""

    def __init__(self, path: Path) -> None:
        self.path = path

    def table(self, name: str, frame: pl.DataFrame, parquet: bool = True) -> None:
        """``name``.csv (and .parquet) from a polars frame."""
        try:
            frame.write_csv(self.path / f"{name}.csv")
            if parquet:
                frame.write_parquet(self.path / f"{name}.parquet")
        except pl.exceptions.PolarsError as err:
            # polars reports a failed write (e.g. a full disk) as its own error type
            raise OSError(f"{name}: {err}") from None

    def text(self, name: str, content: str) -> None:
        (self.path / name).write_text(content, encoding="utf-8")

    def data(self, name: str, content: bytes) -> None:
        (self.path / name).write_bytes(content)


@contextlib.contextmanager
def atomic_folder(target: Path) -> Iterator[OutputFolder]:
    """Yield an ``OutputFolder`` in a temp sibling of ``target``; swap it in on success."""
    target = Path(target)
    parent = target.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.writing-", dir=parent))
    except (FileExistsError, NotADirectoryError):
        raise UserError(
            f"cannot write the output folder {target}: part of that path is a file, not a "
            "folder. Choose a folder you can write to with --output (or [output] folder)."
        ) from None
    except OSError as err:
        raise UserError(
            f"cannot write the output folder {target}: {err.strerror or err}. Choose a folder "
            "you can write to with --output (or [output] folder in the config)."
        ) from None
    if target.exists() and not target.is_dir():
        shutil.rmtree(tmp, ignore_errors=True)
        raise UserError(f"output path {target} exists and is not a folder. Choose another path.")
    interrupted = False
    try:
        yield OutputFolder(tmp)
        with _interrupts_deferred() as deferred:
            _swap_in(tmp, target)
        interrupted = deferred.received
    except OSError as err:
        shutil.rmtree(tmp, ignore_errors=True)
        raise UserError(
            f"writing the output folder {target} failed: {err.strerror or err}. Nothing was "
            "replaced; free disk space or choose another folder and run again."
        ) from None
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    if interrupted:
        raise InterruptedAfterWrite(target)


def _swap_in(tmp: Path, target: Path) -> None:
    """Replace ``target`` by ``tmp``; if the second rename fails, put the previous folder back."""
    old = None
    if target.exists():
        old = Path(tempfile.mkdtemp(prefix=f".{target.name}.previous-", dir=target.parent))
        os.rmdir(old)
        os.replace(target, old)
    try:
        os.replace(tmp, target)
    except OSError:
        if old is not None:
            os.replace(old, target)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


class _Deferred:
    received = False


@contextlib.contextmanager
def _interrupts_deferred() -> Iterator[_Deferred]:
    """Hold back Ctrl-C (SIGINT) for the few renames that swap a folder in, so an interrupt never
    leaves the target missing; ``received`` tells whether one arrived meanwhile."""
    state = _Deferred()
    if threading.current_thread() is not threading.main_thread():
        yield state  # signals are only delivered to the main thread
        return

    def hold(signum: int, frame: FrameType | None) -> None:
        state.received = True

    previous = signal.signal(signal.SIGINT, hold)
    try:
        yield state
    finally:
        signal.signal(signal.SIGINT, previous)
