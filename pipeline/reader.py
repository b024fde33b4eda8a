"""The one module that reads audit files: version check, tables, traces, raw inputs."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from pipeline.audit import FORMAT_NAME, FORMAT_VERSION, read_table, read_traces
from pipeline.errors import AuditFileError

__all__ = ["open_audit", "read_table", "read_traces"]


@contextlib.contextmanager
def open_audit(path: str | Path) -> Iterator[Any]:
    """Open an audit file read-only after checking it is one and that its major version is readable.

    Raises :class:`AuditFileError` for a missing, damaged or truncated file, a file that is not a vzero
    audit file, or one written by a newer major format version.
    """
    import h5py

    p = Path(path)
    if not p.is_file():
        raise AuditFileError(f"audit file {str(path)!r} not found")
    try:
        f = h5py.File(p, "r")
    except OSError as exc:
        raise AuditFileError(f"{path}: not a readable HDF5 file (damaged or truncated?): {exc}") from None
    try:
        if f.attrs.get("format") != FORMAT_NAME:
            raise AuditFileError(f"{path}: an HDF5 file, but not a vzero audit file")
        version = str(f.attrs.get("format_version", "0"))
        if int(version.split(".")[0]) > int(FORMAT_VERSION.split(".")[0]):
            raise AuditFileError(
                f"{path}: audit format {version} is newer than this vzero reads ({FORMAT_VERSION})",
                hint="Install a newer vzero to read it.",
            )
        yield f
    except (KeyError, OSError, ValueError) as exc:
        raise AuditFileError(f"{path}: the audit file is damaged or incomplete: {exc}") from None
    finally:
        f.close()
