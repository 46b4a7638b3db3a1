"""Vibrations of a minimum: a cached finite-difference Hessian, projected frequencies and a proof of minimum.

Three jobs, each a plain function:

- :func:`hessian` (and :func:`hessian_run`, which also returns its accounting): the Hessian by central
  finite differences of analytic gradients along the 3N − 6 internal directions (2(3N − 6) gradient
  calls; or along every Cartesian axis, 6N), with a per-conformer cache folder that survives an
  interrupted run and refuses to mix geometries.
- :func:`frequencies`: harmonic frequencies in cm⁻¹ and Cartesian normal modes, with translations and
  rotations projected out of the mass-weighted Hessian.
- :func:`prove_minimum`: an imaginary mode beyond a threshold is followed downhill (displace both ways,
  re-optimise, keep the lower), and the Hessian recomputed, within a bounded number of rounds.

Units: positions Å, Hessian eV/Å², masses u (ase.data), energies hartree in records.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from ase import Atoms
from ase.units import create_units

from chairqm.errors import ChairqmError
from chairqm.units import HARTREE_EV, KCAL_PER_HARTREE

log = logging.getLogger(__name__)

# CODATA 2018 (plain ase.units is CODATA 2014 in ASE 3.2x; the project's convention is 2018)
units = create_units("2018")

# ħω in eV from sqrt(eigenvalue in eV/(Å² u)), as ase.vibrations does it
_HBAR_OMEGA_EV = units._hbar * units.m / math.sqrt(units._e * units._amu)


# the Hessian itself lives in chairqm.hessian; these names stay importable from here
from chairqm.hessian import (DEFAULT_STEP, KEY_DECIMALS, HessianRun, calculator_tag,  # noqa: E402,F401
                             external_basis, geometry_key, hessian, hessian_run, internal_basis)


def frequencies(hess: np.ndarray, atoms: Atoms) -> tuple[np.ndarray, np.ndarray]:
    """Harmonic frequencies (cm⁻¹) and Cartesian normal modes of a Hessian (eV/Å²).

    Mass-weight, F = M^-½ H M^-½ (u = ase.data atomic masses of `atoms`); build an orthonormal basis D of
    the complement of the translations and rotations (:func:`external_basis`), diagonalise DᵀFD
    (Wilson, Decius, Cross 1955; the projection as in Miller, Handy, Adams, J. Chem. Phys. 1980, 72, 99);
    ħω = ħ·√λ with λ in eV/(Å² u), converted to cm⁻¹ with ase.units.  Negative eigenvalues are returned
    as negative frequencies (imaginary modes: -|ν|).

    Returns (freqs, modes): freqs sorted ascending, length 3N-6 (3N-5 if linear, 0 for one atom); modes
    of shape (n, N, 3), each the Cartesian displacement M^-½ D v normalised to unit length (Å).
    """
    hess = np.asarray(hess, dtype=float)
    n3 = 3 * len(atoms)
    if hess.shape != (n3, n3):
        raise ChairqmError(f"Hessian shape {hess.shape} does not match {len(atoms)} atoms (expected {(n3, n3)})")
    m = np.repeat(np.asarray(atoms.get_masses(), dtype=float), 3)
    inv_sq = 1.0 / np.sqrt(m)
    fm = inv_sq[:, None] * 0.5 * (hess + hess.T) * inv_sq[None, :]
    internal = internal_basis(atoms)       # orthonormal complement of the external space, (3N, 3N-k)
    fi = internal.T @ fm @ internal
    lam, vec = np.linalg.eigh(0.5 * (fi + fi.T))
    freqs = np.sign(lam) * _HBAR_OMEGA_EV * np.sqrt(np.abs(lam)) / units.invcm
    cart = inv_sq[:, None] * (internal @ vec)
    cart /= np.linalg.norm(cart, axis=0)[None, :]
    modes = cart.T.reshape(len(lam), len(atoms), 3)
    return freqs, modes


# --------------------------------------------------------------------------------------- minimum proof
#: Imaginary-frequency threshold in cm⁻¹ beyond which a mode is followed.  Below it an imaginary value is
#: numerical noise rather than a saddle: with GFN2-xTB gradients at default SCF accuracy, step 0.005 Å
#: and geometries converged to fmax 0.005–0.01 eV/Å, the six translations/rotations of the unprojected
#: Hessian come out at up to 4–9 cm⁻¹ (measured on toluene, ethyl- and tert-butylcyclohexane), a measure
#: of how far noise and a not exactly stationary point move a flat mode; the saddles this project must
#: catch lie far above it (boat cyclohexane 104i cm⁻¹, eclipsed rotamers > 100i cm⁻¹).  15i cm⁻¹
#: (0.04 kcal/mol as hν) is also a common practice cut-off.  Residual imaginary modes below it are
#: reported (MinimumProof.small_imaginary); chairqm.thermo.thermochemistry counts them as real with |ν|.
DEFAULT_IMAGINARY_THRESHOLD = 15.0

#: Largest single-atom displacement (Å) along a followed mode, both ways.  0.3 Å clears a saddle's
#: quadratic region for ring and torsion modes (boat → twist-boat moves ring atoms by ≈ 0.3–0.5 Å) without
#: breaking bonds; the optimiser then finishes the descent.
DEFAULT_DISPLACEMENT = 0.3


@dataclass
class MinimumProof:
    """The outcome of :func:`prove_minimum`.

    status: 'minimum' (no mode beyond the threshold), 'saddle-remains' (rounds exhausted with imaginary
    modes left), 'failed' (an engine or optimiser error; `history` says where).
    """

    atoms: Atoms
    freqs: np.ndarray
    modes: np.ndarray
    rounds: int
    history: list = field(default_factory=list)
    n_imaginary: int = 0
    small_imaginary: list = field(default_factory=list)   # |ν| (cm⁻¹) of residual imaginary modes below threshold
    status: str = "failed"
    energy_hartree: float = math.nan
    threshold_cm1: float = DEFAULT_IMAGINARY_THRESHOLD
    gradient_calls: int = 0          # Hessian gradients computed (optimiser calls are counted by the optimiser)
    engine_seconds: float = 0.0      # engine time inside the Hessians
    hessians: list = field(default_factory=list)   # HessianRun.to_record() of every round
    hessian: np.ndarray | None = None              # (3N, 3N) eV/Å² at `atoms` (the final round's), None if none

    @property
    def lowest_frequency_cm1(self) -> float:
        return float(self.freqs[0]) if len(self.freqs) else math.nan

    def to_record(self) -> dict:
        return {"status": self.status, "rounds": self.rounds, "history": list(self.history),
                "n_imaginary": self.n_imaginary, "small_imaginary_cm1": [float(x) for x in self.small_imaginary],
                "threshold_cm1": self.threshold_cm1, "energy_hartree": self.energy_hartree,
                "lowest_frequency_cm1": self.lowest_frequency_cm1,
                "frequencies_cm1": [float(x) for x in self.freqs],
                "gradient_calls": self.gradient_calls, "engine_seconds": round(self.engine_seconds, 4),
                "hessians": list(self.hessians)}


def _single_point_hartree(atoms: Atoms, calc) -> float:
    a = atoms.copy()
    a.calc = calc
    return float(a.get_potential_energy()) / HARTREE_EV


def _fmt_imag(values) -> str:
    return ", ".join(f"{abs(v):.0f}i" for v in values)


def prove_minimum(atoms: Atoms, calc_factory, reoptimize, cache_dir,
                  threshold_cm1: float = DEFAULT_IMAGINARY_THRESHOLD, max_rounds: int = 3,
                  displacement: float = DEFAULT_DISPLACEMENT, step: float = DEFAULT_STEP,
                  energy_hartree: float | None = None, executor=None, basis: str = "internal") -> MinimumProof:
    """Show that `atoms` (an optimised geometry) is a minimum, or follow its imaginary modes to one.

    Round 0 computes the Hessian and frequencies (:func:`hessian_run`, :func:`frequencies`) in
    ``cache_dir/round0``.  While a mode below -`threshold_cm1` remains and fewer than `max_rounds` rounds
    have been made, the most negative mode is followed: the geometry is displaced both ways along it
    (largest atom displacement `displacement` Å), each is re-optimised with ``reoptimize(atoms) ->
    (atoms, energy_hartree)``, the lower is kept, and the Hessian is recomputed in ``cache_dir/roundK``.
    If neither side lowered the energy by at least 1e-4 kcal/mol, the next round doubles the displacement.

    calc_factory() -> a new ASE calculator (the same settings as the optimisation); `executor` is passed to
    :func:`hessian_run` (displacements split over worker processes), and `basis` its displacement
    directions ("internal": 2(3N − 6) gradients, "cartesian": 6N).  `energy_hartree`
    of the input geometry may be passed to save a single point.  Errors of the engine or optimiser give
    status 'failed' with the message in `history` (a ChairqmError, which the user must fix, is raised).
    The threshold: see DEFAULT_IMAGINARY_THRESHOLD; residual imaginary modes with |ν| below it are
    listed in `small_imaginary` and counted as real by chairqm.thermo.thermochemistry (documented there).
    """
    threshold = float(threshold_cm1)
    if not threshold >= 0:
        raise ChairqmError(f"imaginary-frequency threshold must be ≥ 0 cm-1, got {threshold_cm1}")
    if int(max_rounds) < 0:
        raise ChairqmError(f"max_rounds must be ≥ 0, got {max_rounds}")
    cache_dir = Path(cache_dir)
    current = Atoms(atoms.numbers, positions=np.array(atoms.positions, dtype=float), info=dict(atoms.info))
    current.set_initial_charges(atoms.get_initial_charges())
    current.set_initial_magnetic_moments(atoms.get_initial_magnetic_moments())
    proof = MinimumProof(atoms=current, freqs=np.zeros(0), modes=np.zeros((0, len(atoms), 3)), rounds=0,
                         threshold_cm1=threshold)
    history = proof.history

    def analyse(geom: Atoms, rnd: int):
        run = hessian_run(geom, calc_factory, cache_dir / f"round{rnd}", step=step, executor=executor,
                          basis=basis)
        proof.gradient_calls += run.gradient_calls
        proof.engine_seconds += run.engine_seconds
        proof.hessians.append(run.to_record())
        return (*frequencies(run.hessian, geom), run.hessian)

    try:
        energy = _single_point_hartree(current, calc_factory()) if energy_hartree is None else float(energy_hartree)
        freqs, modes, hess = analyse(current, 0)
    except ChairqmError:
        raise
    except Exception as exc:  # engine failure: report it for this conformer, do not stop the others
        history.append(f"round 0: Hessian failed: {type(exc).__name__}: {exc}")
        proof.status = "failed"
        return proof

    scale = float(displacement)
    rnd = 0
    while True:
        imag = freqs[freqs < -threshold]
        if len(imag) == 0:
            small = freqs[freqs < 0]
            note = f"; residual {_fmt_imag(small)} cm-1 below the {threshold:g} cm-1 threshold" if len(small) else ""
            history.append(f"round {rnd}: no imaginary mode beyond {threshold:g}i cm-1 "
                           f"(lowest {freqs[0]:.1f} cm-1){note}" if len(freqs) else f"round {rnd}: no vibrations")
            proof.status = "minimum"
            break
        if rnd >= int(max_rounds):
            history.append(f"round {rnd}: {len(imag)} imaginary mode(s) {_fmt_imag(imag)} cm-1 remain after "
                           f"{rnd} round(s); giving up")
            proof.status = "saddle-remains"
            break
        rnd += 1
        k = int(np.argmin(freqs))
        mode = modes[k] / np.linalg.norm(modes[k], axis=1).max() * scale
        tried = []
        try:
            for sign in (+1, -1):
                trial = current.copy()
                trial.positions = current.positions + sign * mode
                opt_atoms, e = reoptimize(trial)
                tried.append((float(e), sign, opt_atoms))
        except ChairqmError:
            raise
        except Exception as exc:
            history.append(f"round {rnd}: re-optimisation along the {abs(freqs[k]):.0f}i cm-1 mode failed: "
                           f"{type(exc).__name__}: {exc}")
            proof.status = "failed"
            break
        finite = [t for t in tried if math.isfinite(t[0])]
        if not finite:
            history.append(f"round {rnd}: both re-optimisations along the {abs(freqs[k]):.0f}i cm-1 mode "
                           f"returned no energy")
            proof.status = "failed"
            break
        e_new, sign, opt_atoms = min(finite, key=lambda t: t[0])
        de = (e_new - energy) * KCAL_PER_HARTREE
        others = ", ".join(f"{'+' if s > 0 else '-'}: {(ee - energy) * KCAL_PER_HARTREE:+.3f}" for ee, s, _ in tried)
        verdict = f"E lowered by {-de:.3f} kcal/mol" if de < 0 else f"E not lowered ({de:+.3f} kcal/mol)"
        history.append(f"round {rnd}: {len(imag)} imaginary mode(s) {_fmt_imag(imag)} cm-1; displaced ±{scale:.2f} Å "
                       f"along the {abs(freqs[k]):.0f}i mode, re-optimised both (ΔE kcal/mol {others}); kept "
                       f"{'+' if sign > 0 else '-'}, {verdict}")
        if de > -1e-4:
            scale *= 2.0
            history.append(f"round {rnd}: no descent; the next displacement is doubled to {scale:.2f} Å")
        new = Atoms(opt_atoms.numbers, positions=np.array(opt_atoms.positions, dtype=float), info=dict(current.info))
        new.set_initial_charges(current.get_initial_charges())
        new.set_initial_magnetic_moments(current.get_initial_magnetic_moments())
        try:
            new_freqs, new_modes, new_hess = analyse(new, rnd)
        except ChairqmError:
            raise
        except Exception as exc:
            # keep the last geometry whose frequencies are known, so atoms/freqs/energy stay consistent
            history.append(f"round {rnd}: Hessian of the re-optimised geometry failed: {type(exc).__name__}: "
                           f"{exc}; the record keeps the previous geometry")
            proof.status = "failed"
            break
        current, energy, freqs, modes, hess = new, e_new, new_freqs, new_modes, new_hess

    proof.atoms = current
    proof.freqs = freqs
    proof.modes = modes
    proof.hessian = hess
    proof.rounds = rnd
    proof.energy_hartree = float(energy)
    proof.n_imaginary = int(np.sum(freqs < -threshold))
    proof.small_imaginary = [float(abs(v)) for v in freqs if -threshold <= v < 0]
    return proof
