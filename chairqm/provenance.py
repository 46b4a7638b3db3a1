"""What makes a result: the settings that change each stage's results, and the package versions.

RESULT_SETTINGS is the one table of result-relevant settings. It feeds

- the Snakemake rule fingerprints (``chairqm/workflow/rules/common.smk``: a change reruns the stage's jobs),
- the per-conformer record keys (``chairqm.stages.records``: a change recomputes a conformer instead of
  reusing its record),
- the calibration key (``chairqm.calibration.settings_key``: a calibration is applied only to runs made
  with the same settings).

Each entry names top-level keys of the configuration's ``settings`` block. The defaults behind them are
the JSON schema's (``chairqm/schemas/config.schema.json``), never repeated here.
"""

from __future__ import annotations

import functools
import hashlib
import json
from dataclasses import dataclass
from pathlib import Path

_ENGINE = ("engine", "method", "solvent", "accuracy", "electronic_temperature_k")


@dataclass(frozen=True)
class ResultSettings:
    """Settings that change a stage's results.

    job: what its Snakemake job depends on (a change reruns the job).
    record: what one per-conformer record depends on (a change recomputes the conformer); a subset of
    `job`, so that e.g. a new duplicate tolerance re-merges conformers without re-optimising them.
    """

    job: tuple[str, ...]
    record: tuple[str, ...] = ()


RESULT_SETTINGS: dict[str, ResultSettings] = {
    "intake": ResultSettings(job=("enumerate_stereo",)),
    "seeds": ResultSettings(job=("seeds",)),
    "minima": ResultSettings(job=_ENGINE + ("optimize", "unique"), record=_ENGINE + ("optimize",)),
    # thermo.frequency_window_kcal (which minima get a Hessian) is part of "thermo": it changes the job,
    # not a conformer's record (see _thermo_record_settings)
    "thermo": ResultSettings(job=_ENGINE + ("optimize", "thermo", "unique", "temperatures_k"),
                             record=_ENGINE + ("optimize", "thermo")),
    "refine": ResultSettings(job=_ENGINE + ("refine", "temperatures_k"), record=_ENGINE + ("refine",)),
    "ensemble": ResultSettings(job=("temperatures_k", "thermo", "analysis", "refine")),
    "report": ResultSettings(job=("temperatures_k", "analysis", "refine")),
}

#: Settings a calibration line depends on (computed free energies), normalised by
#: chairqm.calibration.settings_key.
CALIBRATION_SETTINGS = ("engine", "method", "solvent", "thermo", "refine")


def _settings_block(settings_or_config: dict) -> dict:
    s = dict(settings_or_config or {})
    if "settings" in s and isinstance(s["settings"], dict):
        s = dict(s["settings"])
    return s


def job_settings(stage: str, settings: dict) -> dict:
    """{key: value} of the settings `stage`'s job depends on (defaults as filled by chairqm.config)."""
    s = _settings_block(settings)
    return {k: s.get(k) for k in RESULT_SETTINGS[stage].job}


def _refine_energy_settings(block):
    """Only what changes a DFT single point's energy (not the selection window or the memory cap)."""
    if block is None:
        return None
    from . import refine
    return refine.energy_settings(refine.resolve(block))


def _thermo_record_settings(block):
    """The thermochemistry settings without the frequency window: the window decides which conformers get
    a Hessian, not what one conformer's Hessian record holds, so widening it reuses every record."""
    if block is None:
        return None
    return {k: v for k, v in dict(block).items() if k != "frequency_window_kcal"}


def _optimize_record_settings(block):
    """The optimisation settings with 'auto' replaced by the optimiser it stands for, so a record made
    under an earlier default is not reused when the default changes; without the molecule's gradient
    budget, which decides which seeds are optimised, not what one optimisation gives."""
    if block is None:
        return None
    from .optimize import resolve_optimizer
    b = {k: v for k, v in dict(block).items() if k != "max_gradient_calls"}
    if "optimizer" in b:
        b["optimizer"] = resolve_optimizer(b["optimizer"])
    return b


#: Per-record views of a setting: the part of it that changes one conformer's record.
_RECORD_VIEW = {"refine": _refine_energy_settings, "thermo": _thermo_record_settings,
                "optimize": _optimize_record_settings}


def record_settings(stage: str, settings: dict) -> dict:
    """{key: value} of the settings one per-conformer record of `stage` depends on."""
    s = _settings_block(settings)
    return {k: _RECORD_VIEW.get(k, lambda v: v)(s.get(k)) for k in RESULT_SETTINGS[stage].record}


@functools.lru_cache(maxsize=1)
def code_digest() -> str:
    """SHA-256 (first 16 hex digits) over the package's Python sources, report/ excepted, in path order."""
    root = Path(__file__).resolve().parent
    h = hashlib.sha256()
    for f in sorted(root.rglob("*.py")):
        rel = f.relative_to(root).as_posix()
        if rel.startswith("report/"):
            continue
        h.update(rel.encode() + b"\0" + f.read_bytes() + b"\0")
    return h.hexdigest()[:16]


def code_version() -> str:
    """The package version and a digest of its Python sources ('0.1.0+3f2a...'; the report's own code
    excepted, :func:`code_digest`): an edit of the package that keeps its version number
    still reruns the jobs, which reuse every per-conformer record whose inputs did not change (records are
    keyed by the version alone) and label it by the current rules."""
    from . import __version__
    return f"{__version__}+{code_digest()}"


def fingerprint(stage: str, settings: dict, version: str, **extra) -> str:
    """One string of everything that changes `stage`'s results: its settings, the package version (with
    :func:`code_version`, its sources' digest) and any `extra` facts (e.g. the molecule's input). Snakemake
    reruns a job whose fingerprint changed (an edit inside the installed package is invisible to it, hence
    the version)."""
    d = job_settings(stage, settings)
    d.update(extra)
    d["chairqm_version"] = version
    return json.dumps(d, sort_keys=True, default=str)


def package_versions() -> dict:
    """Versions of chairqm and of the libraries that change its numbers (from package metadata)."""
    import importlib.metadata as md

    from . import __version__
    out = {"chairqm": __version__}
    for dist in ("tblite", "xtb", "rdkit", "ase", "numpy", "scipy", "pyscf", "dftd3", "snakemake"):
        try:
            out[dist] = md.version(dist)
        except md.PackageNotFoundError:
            out[dist] = None
    return out
