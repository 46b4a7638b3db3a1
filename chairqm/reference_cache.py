"""Same-method A-values of groups, computed once and reused across molecules and runs.

A group's same-method A-value is the chair gap of its monosubstituted cyclohexane (its reference ring)
computed with a run's own settings. The ensemble stage stores every such value it computes here, and the
plan of a later run (or of another molecule's run) takes it from here instead of computing the reference
ring again.

Where: ``$CHAIRQM_REFERENCE_CACHE`` if set, else ``settings.analysis.reference_cache`` if given, else
``$XDG_CACHE_HOME/chairqm/reference-rings`` (``~/.cache/...``). An empty string or ``off`` switches the
cache off (every run computes its own reference rings).

Key: the group's canonical fragment and every setting that changes a computed free energy (the job
settings of the seeds, minima, thermo and refine stages, chairqm.provenance.RESULT_SETTINGS, without the
temperatures), the chairqm version and a digest of the package's own source code (every Python file
except the report's: a changed seeding, merging or thermochemistry rule changes computed A-values while
the version number may stay the same, so a value computed by other code is never reused). One JSON file per key holds {temperature: A-value}; a write merges
with what is there and replaces the file atomically, so two runs sharing the cache never leave half a
file, and the worst a race can do is drop one of two temperatures written at the same moment (it is
computed again next time).
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from . import __version__, fileio

ENV = "CHAIRQM_REFERENCE_CACHE"
_KEY_STAGES = ("seeds", "minima", "thermo", "refine")
T_TOL = 1e-6


def folder(settings: dict | None = None) -> Path | None:
    """The cache folder, or None when the cache is switched off."""
    env = os.environ.get(ENV)
    if env is not None:
        text = env.strip()
    else:
        text = str(((settings or {}).get("analysis") or {}).get("reference_cache", "") or "").strip()
        if not text:
            base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
            return Path(base) / "chairqm" / "reference-rings"
    if text == "" or text.lower() == "off":
        return None
    return Path(text).expanduser()


def key(fragment: str, settings: dict) -> dict:
    """Everything a group's same-method A-value depends on (besides the temperature)."""
    from . import provenance
    from .provenance import job_settings
    parts = {}
    for stage in _KEY_STAGES:
        block = job_settings(stage, settings)
        block.pop("temperatures_k", None)
        parts[stage] = block
    return {"fragment": fragment, "settings": parts, "chairqm_version": __version__,
            "code": provenance.code_digest()}


def _path(fragment: str, settings: dict) -> Path | None:
    root = folder(settings)
    if root is None:
        return None
    text = json.dumps(key(fragment, settings), sort_keys=True, default=str)
    return root / f"{hashlib.sha256(text.encode()).hexdigest()[:24]}.json"


def lookup(fragment: str, settings: dict, temperatures) -> dict[float, float] | None:
    """{T: A-value} for every temperature in `temperatures`, or None if any is missing (or no cache)."""
    path = _path(fragment, settings)
    if path is None or not path.is_file():
        return None
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        if data.get("key") != json.loads(json.dumps(key(fragment, settings), default=str)):
            return None                           # a hash collision or a hand-edited file: not trusted
        values = {float(t): float(v) for t, v in data.get("a_value_kcal", {}).items()}
    except (OSError, ValueError, TypeError, AttributeError):
        return None
    out = {}
    for t in temperatures:
        hit = [v for tt, v in values.items() if abs(tt - float(t)) < T_TOL]
        if not hit:
            return None
        out[float(t)] = hit[0]
    return out


def store(fragment: str, settings: dict, values: dict, source: str = "") -> Path | None:
    """Merge {T: A-value} into the group's entry (atomic replace); returns the file, None without a cache.
    A cache that cannot be written (read-only, full) is skipped silently: it only saves time."""
    path = _path(fragment, settings)
    if path is None or not values:
        return None
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        old = {}
        if path.is_file():
            try:
                old = json.loads(path.read_text(encoding="utf-8")).get("a_value_kcal", {})
            except (OSError, ValueError):
                old = {}
        merged = {**{str(float(t)): float(v) for t, v in old.items()},
                  **{str(float(t)): float(v) for t, v in values.items()}}
        fileio.write_json(path, {"key": json.loads(json.dumps(key(fragment, settings), default=str)),
                                 "a_value_kcal": merged, "source": source})
    except (OSError, fileio.DiskFull):
        return None
    return path
