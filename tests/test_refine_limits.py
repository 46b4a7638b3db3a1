"""DFT refinement within its memory figure, and its cost told before a run: each single point runs with
its worker's address space capped at settings.refine.max_memory_mb + the interpreter's share, so one
that would exceed it fails on its own with the reason; `chairqm check` prints the estimated time and
memory of a configuration with refinement."""

from __future__ import annotations

import resource
from pathlib import Path

import pytest

pytest.importorskip("pyscf")

from chairqm import cli, dft, refine  # noqa: E402
from chairqm.stages.refine import memory_cap  # noqa: E402


def _vmsize_mb() -> int:
    for line in open("/proc/self/status"):
        if line.startswith("VmSize"):
            return int(line.split()[1]) // 1024
    raise AssertionError("no VmSize in /proc/self/status")


def test_basis_size_of_the_estimate_is_the_one_a_single_point_uses():
    """Water in def2-SVP has 24 spherical basis functions: O [3s2p1d] = 3 + 6 + 5, H [2s1p] = 2 + 3 each
    (from memory; the basis set's contraction pattern)."""
    e = refine.estimate({"basis": "def2-SVP"}, ["O", "H", "H"])
    assert e["n_basis"] == 24
    from ase.build import molecule
    assert dft.single_point(molecule("H2O"), 0, 1, {"basis": "def2-SVP"}, threads=1)["n_basis"] == 24


@pytest.mark.parametrize("smiles, measured_s", [
    # single points of the refined reference run, B3LYP-D3(BJ)/def2-TZVP, one thread (docs/benchmarks.md e,
    # median seconds per point): fluoro-, acetoxy- and phenylcyclohexane
    ("FC1CCCCC1", 66.7), ("CC(=O)OC1CCCCC1", 179.7), ("c1ccc(cc1)C1CCCCC1", 265.7)])
def test_time_estimate_is_within_a_third_of_measured_single_points(smiles, measured_s):
    from rdkit import Chem
    mol = Chem.AddHs(Chem.MolFromSmiles(smiles))
    e = refine.estimate({}, [a.GetSymbol() for a in mol.GetAtoms()])
    assert abs(e["seconds"] - measured_s) / measured_s < 1 / 3, (e, measured_s)


def test_a_single_point_beyond_its_memory_cap_fails_on_its_own_and_the_limit_is_restored():
    from ase.build import molecule
    dft.single_point(molecule("H2O"), 0, 1, {"basis": "def2-SVP"}, threads=1)      # imports and caches done
    before = resource.getrlimit(resource.RLIMIT_AS)
    with memory_cap(_vmsize_mb() + 5):
        capped = dft.single_point(molecule("C6H6"), 0, 1, {"basis": "def2-SVP"}, threads=1)
    assert resource.getrlimit(resource.RLIMIT_AS) == before
    assert not capped["converged"] and capped["energy_hartree"] is None
    assert "MemoryError" in capped["message"]
    # the same single point without the cap converges: the cap, not the molecule, stopped it
    assert dft.single_point(molecule("C6H6"), 0, 1, {"basis": "def2-SVP"}, threads=1)["converged"]


def test_memory_cap_never_raises_a_limit_set_from_outside():
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    low = _vmsize_mb() + 4000
    resource.setrlimit(resource.RLIMIT_AS, (low * 2 ** 20, hard))
    try:
        with memory_cap(low + 1000):
            assert resource.getrlimit(resource.RLIMIT_AS)[0] == low * 2 ** 20
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))


def test_check_prints_the_refinement_estimate(capsys):
    cfg = Path(__file__).resolve().parent.parent / "configs" / "demo-refine.yaml"
    assert cli.main(["check", str(cfg)]) == 0
    out = capsys.readouterr().out
    assert "DFT refinement" in out and "s per single point" in out and "CPU hours" in out
    assert f"{refine.worker_memory_cap_mb({})} MB" in out


def test_check_without_refinement_prints_no_estimate(write_config, capsys):
    assert cli.main(["check", str(write_config({"molecules": [{"name": "m", "smiles": "CC1CCCCC1"}]}))]) == 0
    assert "DFT refinement" not in capsys.readouterr().out
