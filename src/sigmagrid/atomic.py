"""Atomic file writes: a temporary name in the target's folder, then a rename.

A killed process leaves at most a temporary (``.<name>.<pid>.*.tmp*``), never a half-written
target; the next writer removes temporaries of processes that no longer run. Kept apart from
:mod:`sigmagrid.store` so that light callers (the workflow's parse step) need not import xarray.
"""

from __future__ import annotations

import contextlib
import glob
import os
import tempfile
from pathlib import Path


@contextlib.contextmanager
def atomic_path(path: str | Path, suffix: str = ".tmp"):
    """Yield a temporary path in ``path``'s folder; on success it becomes ``path`` (rename).

    Readable by the team (mkstemp makes files private). On any error, or a kill, the final name
    is never half-written: the temporary is removed, or left for :func:`remove_stale_temporaries`.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_temporaries(path)
    fd, tmp = tempfile.mkstemp(prefix=_temp_prefix(path), suffix=suffix, dir=path.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _temp_prefix(path: Path) -> str:
    # the writer's pid in the name tells a leftover of a killed run from a write in progress
    return f".{path.name}.{os.getpid()}."


def remove_stale_temporaries(path: str | Path) -> list[Path]:
    """Delete temporary files of ``path`` left by writers that no longer run (killed, rebooted).

    Returns the files removed. Temporaries of a live process (a concurrent write) are kept.
    """
    path = Path(path)
    removed = []
    for tmp in path.parent.glob(f".{glob.escape(path.name)}.*.tmp*"):
        pid_text = tmp.name[len(path.name) + 2:].split(".", 1)[0]
        if pid_text.isdigit() and _alive(int(pid_text)):
            continue
        tmp.unlink(missing_ok=True)
        removed.append(tmp)
    return removed


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's live process
        return True
    return True


def write_text_atomic(text: str, path: str | Path) -> Path:
    with atomic_path(path) as tmp:
        tmp.write_text(text)
    return Path(path)
