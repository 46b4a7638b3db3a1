"""Where the packaged Snakemake workflow and its profiles are, wherever chairqm is installed.

The workflow (``Snakefile``, ``rules/*.smk``) and the Snakemake profiles (``profiles/NAME/config.yaml``)
are package data of ``chairqm.workflow``; they are found through :mod:`importlib.resources`, so a
wheel, ``pip install .`` and an editable install all run the same files.
"""

from __future__ import annotations

from importlib import resources
from pathlib import Path

from ..errors import ChairqmError


def folder() -> Path:
    """The folder holding the packaged workflow (a real directory: Snakemake reads files by path)."""
    root = resources.files(__name__)
    path = Path(str(root))
    if not (path / "Snakefile").is_file():
        raise ChairqmError(f"the packaged workflow was not found at {root}: reinstall chairqm "
                           "(`pip install .` from a source checkout, or its wheel) without zip-safe packaging")
    return path


def snakefile() -> Path:
    """Path of the packaged Snakefile."""
    return folder() / "Snakefile"


def profile_names() -> list[str]:
    """Names of the Snakemake profiles shipped with chairqm (e.g. laptop, slurm)."""
    base = folder() / "profiles"
    return sorted(p.name for p in base.iterdir() if (p / "config.yaml").is_file())


def profile(name: str) -> Path:
    """Folder of a packaged Snakemake profile by name; a ChairqmError lists the names otherwise."""
    path = folder() / "profiles" / name
    if not (path / "config.yaml").is_file():
        raise ChairqmError(f"no packaged profile {name!r}: the profiles are {', '.join(profile_names())} "
                           "(or give the path of a profile folder)")
    return path
