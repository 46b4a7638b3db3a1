"""chairqm installs like any Python tool: the workflow and its profiles are package data, found through
importlib.resources, so a built wheel installed outside the source tree runs `chairqm check` and a run.

The slow test builds the wheel from a copy of the source (nothing written into the checkout), installs
it with `--no-deps --no-index` into a fresh virtual environment in a temporary folder, and lets that
environment see the already-installed dependencies through a .pth line pointing at this interpreter's
site-packages (a plain path line: the editable install's finder there is not activated), so the test
needs no network and takes seconds to install.
"""

from __future__ import annotations

import fnmatch
import importlib.util
import os
import shutil
import subprocess
import sys
import sysconfig
import tomllib
from pathlib import Path

import pandas as pd
import pytest
import yaml

from chairqm import cli, workflow

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "configs" / "demo.yaml"


def test_packaged_workflow_is_found_through_the_package():
    sf = cli.snakefile()
    assert sf == workflow.snakefile()
    assert sf.is_file() and sf.parent.parent == Path(importlib.util.find_spec("chairqm").origin).parent
    assert {"laptop", "slurm"} <= set(workflow.profile_names())
    # the top-level Snakefile of the checkout only includes the packaged one
    top = (ROOT / "Snakefile").read_text()
    assert 'include: "chairqm/workflow/Snakefile"' in top and "rule " not in top


def test_every_workflow_file_is_package_data():
    """A file under chairqm/workflow/ that no package-data pattern matches would be missing from the wheel."""
    patterns = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["package-data"]["chairqm"]
    base = ROOT / "chairqm"
    files = [p.relative_to(base).as_posix() for p in (base / "workflow").rglob("*")
             if p.is_file() and "__pycache__" not in p.parts and p.suffix != ".py"]
    assert "workflow/Snakefile" in files and "workflow/rules/common.smk" in files
    missing = [f for f in files if not any(fnmatch.fnmatch(f, pat) for pat in patterns)]
    assert not missing, f"not shipped in the wheel: {missing}"


def test_profile_names_resolve_to_the_packaged_profiles(tmp_path, monkeypatch):
    laptop = str(workflow.profile("laptop"))
    assert cli.resolve_profiles(["--profile", "laptop"]) == ["--profile", laptop]
    assert cli.resolve_profiles(["--profile=slurm", "-n"]) == [f"--profile={workflow.profile('slurm')}", "-n"]
    # the source tree's old location keeps working from any folder
    monkeypatch.chdir(tmp_path)
    assert cli.resolve_profiles(["--profile", "workflows/profiles/laptop"]) == ["--profile", laptop]
    # an existing folder of the user's own wins over a packaged name
    (tmp_path / "laptop").mkdir()
    assert cli.resolve_profiles(["--profile", "laptop"]) == ["--profile", "laptop"]
    # anything else goes to Snakemake unchanged (it reports unknown profiles itself)
    assert cli.resolve_profiles(["--profile", "elsewhere/mine", "--dry-run"]) == ["--profile", "elsewhere/mine", "--dry-run"]
    with pytest.raises(cli.ChairqmError, match="laptop, slurm"):
        workflow.profile("cluster9")


def _can_build_offline() -> str | None:
    """Why the wheel cannot be built without a network here, or None."""
    try:
        import setuptools
        import wheel  # noqa: F401  (setuptools' bdist_wheel)
    except ImportError as exc:
        return f"needs setuptools and wheel in this environment for an offline build ({exc}): pip install -e '.[test]'"
    if int(setuptools.__version__.split(".")[0]) < 68:
        return f"pyproject.toml asks for setuptools>=68, this environment has {setuptools.__version__}"
    return None


@pytest.mark.slow
@pytest.mark.skipif(_can_build_offline() is not None, reason=str(_can_build_offline()))
def test_wheel_installed_outside_the_source_tree_checks_and_runs(tmp_path):
    src = tmp_path / "src"
    src.mkdir()
    for name in ("pyproject.toml", "README.md"):
        shutil.copy(ROOT / name, src / name)
    shutil.copytree(ROOT / "chairqm", src / "chairqm", ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    dist = tmp_path / "dist"
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps", "--no-build-isolation",
                    "-w", str(dist), str(src)], check=True, capture_output=True, timeout=300)
    wheels = list(dist.glob("chairqm-*.whl"))
    assert len(wheels) == 1

    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(venv)], check=True, timeout=120)
    py = venv / "bin" / "python"
    site = subprocess.run([str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
                          check=True, capture_output=True, text=True).stdout.strip()
    Path(site, "_chairqm_test_deps.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    subprocess.run([sys.executable, "-m", "pip", "--python", str(py), "install", "--quiet", "--no-deps",
                    "--no-index", str(wheels[0])], check=True, capture_output=True, timeout=300)

    work = tmp_path / "elsewhere"          # no Snakefile, no workflows/, no source tree here
    work.mkdir()
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "CHAIRQM_FAULTS", "SNAKEMAKE_PROFILE")}
    env["OMP_NUM_THREADS"] = "1"
    where = subprocess.run([str(py), "-c", "import chairqm, chairqm.workflow as w; print(chairqm.__file__); "
                            "print(w.snakefile())"], cwd=work, env=env, check=True, capture_output=True,
                           text=True).stdout.split()
    assert all(p.startswith(str(venv)) for p in where), where      # the wheel's copy, not the checkout

    chairqm = venv / "bin" / "chairqm"
    shutil.copy(DEMO, work / "demo.yaml")
    proc = subprocess.run([str(chairqm), "check", "demo.yaml"], cwd=work, env=env, capture_output=True,
                          text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert "methylcyclohexane" in proc.stdout

    # the demo configuration, whole, from the wheel's own workflow and profile
    proc = subprocess.run([str(chairqm), "run", "demo.yaml", "--out", "demo", "--cores", "2", "--profile", "laptop"],
                          cwd=work, env=env, capture_output=True, text=True, timeout=1800)
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr[-3000:]
    summary = pd.read_csv(work / "demo" / "summary.csv")
    demo_names = [m["name"] for m in yaml.safe_load(DEMO.read_text())["molecules"]]
    assert set(demo_names) <= set(summary["molecule"]), list(summary["molecule"])
    assert set(summary["status"]) == {"ok"}, summary[["molecule", "status"]]
    # the demo's four molecules and the reference rings of its tert-butyl, methoxy and cyclopropyl groups
    # (methylcyclohexane is itself the methyl group's)
    seeds = sorted(p.parent.name for p in (work / "demo").glob("*/seeds.csv"))
    assert len(seeds) == 7, seeds
    mch = summary[summary["molecule"] == "methylcyclohexane"].iloc[0]
    # methylcyclohexane prefers the equatorial chair; A(Me) ~1.7-1.8 kcal/mol (Eliel, Wilen and Mander,
    # Stereochemistry of Organic Compounds, 1994, from memory); GFN2-xTB within ~0.5 of it
    assert 1.2 < float(mch["a_value_kcal"]) < 2.4
    assert (work / "demo" / "report.html").is_file()
