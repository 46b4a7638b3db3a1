"""Stage entry points the Snakemake rules call: `python -m chairqm.stages STAGE --config C --molecule M`.

Each stage reads the files of the stage before it from the current folder (the run's output
folder) and writes its own, atomically. The science lives in the other modules.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from . import config as cq_config
from . import fileio
from .errors import ChairqmError
from .molecule import Perceived, substituents_table
from .plan import make_plan


def _context(args):
    cfg = cq_config.load(args.config)
    plan = make_plan(cfg)
    if plan.problems:
        raise ChairqmError("\n".join(plan.problems))
    return cfg, plan


def load_molecule(name: str) -> Perceived:
    return Perceived.from_json(Path(name, "molecule.json").read_text())


def stage_intake(cfg, plan, name):
    p = plan.get(name)
    folder = Path(name)
    fileio.write_text(folder / "molecule.json", p.to_json() + "\n")
    fileio.write_csv(folder / "substituents.csv", substituents_table(p))


STAGES = {"intake": stage_intake}


def main(argv=None):
    ap = argparse.ArgumentParser(prog="python -m chairqm.stages")
    ap.add_argument("stage", choices=sorted(STAGES))
    ap.add_argument("--config", required=True)
    ap.add_argument("--molecule")
    args = ap.parse_args(argv)
    try:
        cfg, plan = _context(args)
        STAGES[args.stage](cfg, plan, args.molecule)
    except ChairqmError as exc:
        print(f"chairqm: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
