"""Output files: a location checked before the work, and files written whole or not at all.

Every file molinv writes goes through :func:`written_atomically`: it is written under a
temporary name in its own folder and renamed to its final name only once complete (a
rename within a folder is atomic on POSIX file systems), so an interrupted run, a full
disk or a crash never leaves a truncated file under a final name. The command line
checks each output location with :func:`check_writable` before it starts the work.
"""

from __future__ import annotations

import os
import socket
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from molinv.errors import MolinvError


class OutputError(MolinvError, OSError):
    """An output location that cannot be written (missing rights, not a folder, full disk)."""


def check_writable(path, *, folder: bool = False) -> None:
    """Raise :class:`OutputError` unless a file can be created at ``path`` (or, with
    ``folder``, inside the folder ``path``); missing folders are created."""
    path = Path(path)
    if not folder and path.is_dir():
        raise OutputError(f"cannot write {path}: it is a folder; give a file name")
    target = path if folder else path.parent
    try:
        target.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=target, prefix=".molinv-write-check-"):
            pass
    except OSError as error:
        raise OutputError(f"cannot write to {target}: {error.strerror or error}") from None


@contextmanager
def written_atomically(path) -> Iterator[Path]:
    """A temporary path beside ``path`` (same folder and suffix) for the block to write;
    renamed to ``path`` when the block ends, removed when it fails. Names differ per host
    and process, so that writers on a shared folder do not meet."""
    path = Path(path)
    temporary = path.with_name(f".{path.stem}.{socket.gethostname()}.{os.getpid()}.partial{path.suffix}")
    try:
        yield temporary
        os.replace(temporary, path)
    except BaseException as error:
        temporary.unlink(missing_ok=True)
        if isinstance(error, OSError) and not isinstance(error, OutputError):
            raise OutputError(f"cannot write {path}: {error.strerror or error}") from error
        raise
