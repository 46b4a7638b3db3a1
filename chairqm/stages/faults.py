"""Fault injection for the reliability tests (CHAIRQM_FAULTS); inactive in normal use.

CHAIRQM_FAULTS='{"scf": ["mol/seed"], "bond": ["mol/seed"], "imaginary": ["mol/c001"],
"crash": ["mol/minima"], "dft_scf": ["mol/c001"], "pause": ["report"]}'. Each fault makes a real failure happen in the named
place (an engine that raises, a stretched bond, a genuine saddle point, an unexpected error inside a
stage, a DFT SCF that cannot converge) so the tests see the isolation machinery work; "pause" holds a
stage (a molecule's 'mol/stage' or the run-level 'report') a few seconds before it computes, so that an
interrupt test hits it there however loaded the machine is.
"""

from __future__ import annotations

import json
import os


def fault(kind: str, where: str) -> bool:
    """True when CHAIRQM_FAULTS asks for a fault of `kind` at `where` ('molecule/seed', 'molecule/stage')."""
    text = os.environ.get("CHAIRQM_FAULTS")
    if not text:
        return False
    return where in json.loads(text).get(kind, [])


def failing_calculator():
    """Stands in for an engine whose SCF never converges."""
    from ase.calculators.calculator import Calculator

    class FailingSCF(Calculator):
        implemented_properties = ["energy", "forces"]

        def calculate(self, *args, **kwargs):
            raise RuntimeError("SCF did not converge (injected fault)")

    return FailingSCF()


def stretch_a_bond(atoms):
    """Pull the first hydrogen 1.5 Å away from its neighbour (a broken bond)."""
    import numpy as np
    a = atoms.copy()
    h = int(np.where(a.numbers == 1)[0][0])
    d = a.positions - a.positions[h]
    dist = np.linalg.norm(d, axis=1)
    dist[h] = np.inf
    j = int(np.argmin(dist))
    v = a.positions[h] - a.positions[j]
    a.positions[h] += 1.5 * v / np.linalg.norm(v)
    return a


def eclipse_a_methyl(atoms, mol):
    """Rotate the hydrogens of a methyl group by 60° about its bond (a genuine saddle point of the methyl
    rotation)."""
    import numpy as np
    a = atoms.copy()
    for atom in mol.GetAtoms():
        hs = [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() == 1]
        heavy = [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() > 1]
        if atom.GetSymbol() == "C" and len(hs) == 3 and len(heavy) == 1:
            c, x = atom.GetIdx(), heavy[0]
            axis = a.positions[c] - a.positions[x]
            axis /= np.linalg.norm(axis)
            th = np.pi / 3
            K = np.array([[0, -axis[2], axis[1]], [axis[2], 0, -axis[0]], [-axis[1], axis[0], 0]])
            R = np.eye(3) + np.sin(th) * K + (1 - np.cos(th)) * K @ K
            for h in hs:
                a.positions[h] = a.positions[c] + R @ (a.positions[h] - a.positions[c])
            return a
    return a
