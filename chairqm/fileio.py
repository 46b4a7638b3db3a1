"""Atomic file writes (temporary name, then rename) so an interrupted run never leaves a half-written file."""

from __future__ import annotations

import errno
import json
import os
import tempfile
from pathlib import Path

_UMASK = os.umask(0)
os.umask(_UMASK)


#: errno values of a full disk or an exhausted quota
DISK_FULL_ERRNOS = (errno.ENOSPC, errno.EDQUOT)


class DiskFull(BaseException):
    """A write failed because the disk holding it (or the user's quota) is full.

    Deliberately not an Exception: the catch-alls that turn an engine error into one conformer's failure
    must not turn a full disk into a failed conformer, which a finished job would then keep. It stops the
    stage's job instead (Snakemake removes the job's outputs), and `chairqm run` says how much space is
    needed; the rerun resumes from the records written before."""

    def __init__(self, path: str, detail: str = ""):
        super().__init__(path, detail)
        self.path = str(path)
        self.detail = detail

    def __str__(self) -> str:
        return f"no space left on the device writing {self.path}" + (f" ({self.detail})" if self.detail else "")


def is_disk_full(exc: BaseException) -> bool:
    return isinstance(exc, DiskFull) or (isinstance(exc, OSError) and exc.errno in DISK_FULL_ERRNOS)


def write_text(path, text: str, fsync: bool = True) -> None:
    write_bytes(path, text.encode("utf-8"), fsync=fsync)


def write_bytes(path, data: bytes, fsync: bool = True) -> None:
    """Atomic write. fsync=False suits cache files: after a power cut a damaged cache file fails to load
    and is recomputed, while an interrupted process can never leave a half-written one."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    except OSError as exc:
        if exc.errno in DISK_FULL_ERRNOS:
            raise DiskFull(str(path), exc.strerror or "") from exc
        raise
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            if fsync:
                os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_UMASK)      # mkstemp makes 0600; results are ordinary files
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        if isinstance(exc, OSError) and exc.errno in DISK_FULL_ERRNOS:
            raise DiskFull(str(path), exc.strerror or "") from exc
        raise


def write_json(path, obj, fsync: bool = True) -> None:
    write_text(path, json.dumps(obj, indent=1, sort_keys=True, default=_default) + "\n", fsync=fsync)


#: Significant digits of the numbers in the CSV files chairqm writes (README, "What lands in the output
#: folder"): enough for absolute energies in hartree to 1e-9 Eh, where Python's shortest round-trip form
#: prints 16-17 digits of noise. summary.csv and avalues.csv use SUMMARY_SIGNIFICANT_DIGITS.
CSV_SIGNIFICANT_DIGITS = 12
SUMMARY_SIGNIFICANT_DIGITS = 8


def write_csv(path, frame, significant_digits: int = CSV_SIGNIFICANT_DIGITS) -> None:
    """Write a DataFrame as CSV (atomically) with every float to `significant_digits` significant digits,
    also floats inside columns of mixed type; integers, text and empty cells unchanged."""
    fmt = f"%.{int(significant_digits)}g"
    df = frame.copy()
    for c in df.columns:
        if df[c].dtype == object:
            df[c] = [fmt % v if isinstance(v, float) and v == v else v for v in df[c]]
    write_text(path, df.to_csv(index=False, lineterminator="\n", float_format=fmt))


def read_json(path):
    return json.loads(Path(path).read_text(encoding="utf-8"))


def _default(o):
    import numpy as np
    if isinstance(o, np.integer):
        return int(o)
    if isinstance(o, np.floating):
        return float(o)
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, (set, tuple)):
        return list(o)
    raise TypeError(f"not JSON serialisable: {type(o)}")
