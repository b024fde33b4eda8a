"""Replacing outputs in one step: an atomic swap of two folders, and whether the process that left a
temporary folder behind is still running (its id is in the folder's name)."""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Mapping
from pathlib import Path


def exchange(a: Path, b: Path) -> bool:
    """Swap two existing paths atomically (Linux ``renameat2`` with ``RENAME_EXCHANGE``); False where the
    system or file system cannot, so the caller falls back to two renames."""
    import ctypes
    import errno

    try:
        call = ctypes.CDLL(None, use_errno=True).renameat2
    except (OSError, AttributeError):
        return False
    call.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    call.restype = ctypes.c_int
    at_cwd, rename_exchange = -100, 2
    if call(at_cwd, os.fsencode(a), at_cwd, os.fsencode(b), rename_exchange) == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.EOPNOTSUPP):  # an old kernel or a file system without it
        return False
    raise OSError(code, os.strerror(code), str(b))


def alive(pid: int) -> bool:
    """Whether a process with this id exists (on this machine)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def replace_set(out: Path, files: Mapping[str, bytes], prefix: str) -> None:
    """Write ``files`` (relative path -> bytes) under ``out`` as one set: all are written to a staging folder
    first (a failure or a kill there leaves the old set untouched), then each top-level entry is moved in,
    folders by atomic exchange, the files last. The staging folder is named ``.<prefix>.partial-<pid>-*``;
    those of processes that are gone are removed by the next call."""
    from vzero.errors import OutputWriteError

    try:
        _replace_set(out, files, prefix)
    except OSError as exc:  # a full disk, a read-only folder: one sentence naming the folder
        raise OutputWriteError.from_os(exc, exc.filename or out) from None


def _replace_set(out: Path, files: Mapping[str, bytes], prefix: str) -> None:
    out.mkdir(parents=True, exist_ok=True)
    for stale in out.glob(f".{prefix}.partial-*"):
        pid = stale.name.removeprefix(f".{prefix}.partial-").split("-", 1)[0]
        if pid.isdigit() and not alive(int(pid)):
            shutil.rmtree(stale, ignore_errors=True)
    stage = Path(tempfile.mkdtemp(prefix=f".{prefix}.partial-{os.getpid()}-", dir=out))
    try:
        for rel, data in files.items():
            path = stage / rel
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(data)
        entries = sorted(stage.iterdir(), key=lambda p: (not p.is_dir(), p.name))  # folders first
        for entry in entries:
            target = out / entry.name
            if entry.is_dir() and target.is_dir():
                if not exchange(entry, target):
                    os.replace(target, stage / f".old-{entry.name}")
                    os.replace(entry, target)
            elif entry.is_dir() and target.exists():
                raise FileExistsError(17, "a file is in the way of a folder", str(target))
            else:
                os.replace(entry, target)
    finally:
        shutil.rmtree(stage, ignore_errors=True)
