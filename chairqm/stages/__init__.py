"""The pipeline: one registry of stages, in run order, that every other place reads.

`python -m chairqm.stages STAGE --config C [--molecule M]` runs one stage in the run's output folder
(the runner is ``__main__.py``). Each stage is a module here named like its rule file
(``chairqm/workflow/rules/STAGE.smk``) with

- ``run(cfg, plan, name, threads)``: read the declared outputs of the stages before it, write its own
  (atomically);
- ``write_empty(name, settings, message)``: the same outputs, empty but with the success path's headers,
  written when the stage broke unexpectedly (per-molecule stages only).

Who reads STAGES: the runner (order, failure isolation), the command line (``--until`` choices, retrying a
failed stage), ``chairqm/workflow/rules/common.smk`` (each rule's outputs) and ``chairqm/workflow/rules/targets.smk``
(the ``until_STAGE`` end points). Adding a stage: a module here with its entry below, and a rule file.
This module imports nothing heavy, so the command line can read the registry quickly.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass


@dataclass(frozen=True)
class Stage:
    """One stage of the pipeline.

    outputs: what the stage writes, relative to the molecule's folder (or to the run folder when not
    per_molecule); a name ending in "/" is a folder of per-conformer files. The first output is the one
    `--until` and a retry aim at.
    optional_setting: the stage runs only when settings[optional_setting] is not None.
    isolated: an unexpected error fails only this molecule (empty outputs + failed.json) instead of the run.
    until: offered as `chairqm run --until NAME`.
    """

    name: str
    outputs: tuple[str, ...]
    per_molecule: bool = True
    optional_setting: str | None = None
    isolated: bool = True
    until: bool = True

    @property
    def module(self):
        return importlib.import_module(f"{__name__}.{self.name}")

    def enabled(self, settings: dict) -> bool:
        return self.optional_setting is None or (settings or {}).get(self.optional_setting) is not None

    def run(self, cfg, plan, name, threads=1):
        return self.module.run(cfg, plan, name, threads=threads)

    def write_empty(self, name, settings, message):
        return self.module.write_empty(name, settings, message)

    def paths(self) -> list[tuple[str, bool]]:
        """(path, is_folder) of every output, in order, folder names without their trailing "/"."""
        return [(o.rstrip("/"), o.endswith("/")) for o in self.outputs]


STAGES: tuple[Stage, ...] = (
    Stage("intake", ("substituents.csv", "molecule.json"), isolated=False),
    Stage("seeds", ("seeds.csv", "seeds/")),
    Stage("minima", ("minima.csv", "minima.json", "minima/")),
    Stage("thermo", ("thermo.csv", "thermo.json", "thermo/")),
    Stage("refine", ("refine.csv", "refine.json"), optional_setting="refine"),
    Stage("ensemble", ("ensemble.json", "families.csv", "conformers.csv", "conformers.sdf")),
    Stage("report", ("summary.csv", "provenance.json", "conformers.db", "report.html"),
          per_molecule=False, isolated=False, until=False),
)

FAILURE_RECORD = "failed.json"       # in a molecule's folder: {"stage", "reason"} of its failed stage


def names() -> list[str]:
    return [s.name for s in STAGES]


def get(name: str) -> Stage:
    for s in STAGES:
        if s.name == name:
            return s
    raise KeyError(f"no stage named {name!r}; stages: {', '.join(names())}")


def index(name: str) -> int:
    return names().index(get(name).name)


def until_names() -> list[str]:
    """Stages a run can stop after (`chairqm run --until`), in run order."""
    return [s.name for s in STAGES if s.until]


def main(argv=None) -> int:
    from .__main__ import main as _main
    return _main(argv)
