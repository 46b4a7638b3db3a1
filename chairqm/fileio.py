"""Atomic file writes (temporary name, then rename) so an interrupted run never leaves a half-written file."""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

_UMASK = os.umask(0)
os.umask(_UMASK)


def write_text(path, text: str, fsync: bool = True) -> None:
    write_bytes(path, text.encode("utf-8"), fsync=fsync)


def write_bytes(path, data: bytes, fsync: bool = True) -> None:
    """Atomic write. fsync=False suits cache files: after a power cut a damaged cache file fails to load
    and is recomputed, while an interrupted process can never leave a half-written one."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            if fsync:
                os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_UMASK)      # mkstemp makes 0600; results are ordinary files
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def write_json(path, obj, fsync: bool = True) -> None:
    write_text(path, json.dumps(obj, indent=1, sort_keys=True, default=_default) + "\n", fsync=fsync)


def write_csv(path, frame) -> None:
    write_text(path, frame.to_csv(index=False, lineterminator="\n"))


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
