"""DFT single points with PySCF: SCF or Kohn–Sham energy, DFT-D3 dispersion and implicit solvent.

What chairqm.refine calls for each conformer it refines: :func:`single_point` at a fixed geometry and,
with solvent_model 'gfn2-delta', :func:`xtb_solvation_hartree`.  The settings (functional, basis, ...)
are those of chairqm.refine.resolve; :func:`check_level` is the part of chairqm.refine.check that needs
PySCF.  Everything runs on the CPU.

- Electronic structure: PySCF [Sun et al., WIREs Comput. Mol. Sci. 2018, 8, e1340; J. Chem. Phys. 2020,
  153, 024109], restricted Kohn–Sham for singlets and unrestricted for everything else; functional names
  are Libxc's as PySCF parses them.  PySCF's ``B3LYP`` is the VWN-RPA variant (the original definition of
  Stephens, Devlin, Chabalowski, Frisch, J. Phys. Chem. 1994, 98, 11623), not the VWN5 one.  ``HF``
  selects Hartree–Fock.  Density fitting of the Coulomb and exchange integrals with PySCF's default
  auxiliary basis for the orbital basis (for the def2 sets the universal JKFIT set of Weigend, J. Comput.
  Chem. 2008, 29, 167, which PySCF names e.g. def2-svp-jkfit) is on by default.  The def2 sets use their effective core potentials beyond Kr.
- Dispersion: DFT-D3 with Becke–Johnson (rational) damping [Grimme, Ehrlich, Goerigk, J. Comput. Chem.
  2011, 32, 1456] or zero damping [Grimme, Antony, Ehrlich, Krieg, J. Chem. Phys. 2010, 132, 154104],
  two-body terms only (no three-body ATM term, as the damping parameters were fitted), computed by the
  simple-dftd3 library (PyPI ``dftd3``) with its parameter table for the functional.  The dispersion
  energy is added to the SCF energy after the SCF; it does not change the density.
- Solvent, when the run has one (``settings.solvent``):
  ``gfn2-delta`` (default): the DFT single point is in the gas phase and the GFN2-xTB solvation free energy
  at the same geometry, ΔG_solv = E(GFN2-xTB, solvated) − E(GFN2-xTB, gas), is added
  (:func:`xtb_solvation_hartree`);
  ``pcm``: PySCF's own conductor-like polarisable continuum (C-PCM; Barone, Cossi, J. Phys. Chem. A 1998,
  102, 1995) inside the SCF, with the solvent's dielectric constant from the Minnesota solvent descriptor
  table that PySCF ships (``pyscf.solvent.smd.solvent_db``); only the electrostatic part, no cavity or
  dispersion terms.  Without a solvent the setting has no effect.

Energies in hartree, lengths in Å (converted to bohr with chairqm.units).
"""

from __future__ import annotations

import contextlib
import difflib
import math
import os
import time
import warnings

import numpy as np

from chairqm.errors import ChairqmError
from chairqm.units import BOHR_A

# tblite / xtb solvent names -> names in PySCF's Minnesota solvent table (the rest match case-insensitively)
_SOLVENT_ALIASES = {
    "ch2cl2": "dichloromethane", "chcl3": "chloroform", "cs2": "carbon disulfide", "ccl4": "carbon tetrachloride",
    "dioxane": "1,4-dioxane", "dmf": "N,N-dimethylformamide", "dmso": "dimethylsulfoxide", "ether": "diethylether",
    "ethylacetate": "ethylethanoate", "hexadecane": "n-hexadecane", "hexane": "n-hexane", "octanol": "1-octanol",
    "thf": "tetrahydrofuran", "h2o": "water",
}

def did_you_mean(name, valid) -> str:
    """' Did you mean 'x'?' for the closest of `valid` to `name` (difflib), or ''."""
    close = difflib.get_close_matches(str(name).lower(), [str(v).lower() for v in valid], n=1, cutoff=0.6)
    return f" Did you mean {close[0]!r}?" if close else ""


def _require_pyscf():
    try:
        import pyscf  # noqa: F401
    except ImportError:
        raise ChairqmError("refinement needs PySCF: install the 'dft' extra (pip install 'chairqm[dft]') "
                           "or remove settings.refine.") from None
    return pyscf


def _require_dftd3():
    try:
        import dftd3.interface  # noqa: F401
    except ImportError:
        raise ChairqmError("dispersion d3bj/d3zero needs the simple-dftd3 Python API (PyPI 'dftd3'): install the "
                           "'dft' extra (pip install 'chairqm[dft]') or set settings.refine.dispersion: none."
                           ) from None
    return dftd3.interface


def is_hf(functional: str) -> bool:
    """True for Hartree–Fock ('HF', 'RHF', 'UHF') rather than a density functional."""
    return functional.strip().upper() in ("HF", "RHF", "UHF")


def check_functional(functional: str) -> None:
    """ChairqmError unless PySCF/Libxc knows `functional` (or it is HF) without a dispersion suffix."""
    if is_hf(functional):
        return
    _require_pyscf()
    from pyscf.dft import dft_parser, libxc
    try:
        xc, _nlc, disp = dft_parser.parse_dft(functional)
    except (NotImplementedError, KeyError, ValueError) as err:
        raise ChairqmError(f"functional {functional!r} is not supported by PySCF ({err}): choose another "
                           "settings.refine.functional, e.g. B3LYP, PBE0, r2SCAN.") from None
    if disp:
        raise ChairqmError(f"functional {functional!r} names a dispersion correction ({disp}): give the bare "
                           f"functional ({xc}) and the correction in settings.refine.dispersion.")
    try:
        libxc.parse_xc(xc)
    except (KeyError, ValueError) as err:
        msg = str(err).strip("'\"")
        raise ChairqmError(f"unknown functional {functional!r} ({msg}): use a Libxc name PySCF knows, "
                           "e.g. B3LYP, PBE0, r2SCAN, TPSS, M06-2X, or HF.") from None


def d3_param(functional: str, dispersion: str):
    """The simple-dftd3 damping-parameter object for (functional, 'd3bj'|'d3zero'); ChairqmError if none."""
    d3 = _require_dftd3()
    cls = {"d3bj": d3.RationalDampingParam, "d3zero": d3.ZeroDampingParam}[dispersion]
    name = "hf" if is_hf(functional) else functional.strip().lower()
    try:
        return cls(method=name, atm=False)
    except (RuntimeError, ValueError) as err:
        raise ChairqmError(f"DFT-D3 ({dispersion}) has no parameters for functional {functional!r} ({err}): "
                           "choose another functional or set settings.refine.dispersion: none.") from None


def basis_for(basis: str, symbol: str):
    """(basis functions, ECP) of one element in a named basis, or ChairqmError."""
    from pyscf import gto
    from pyscf.gto.basis import BasisNotFoundError
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")       # PySCF suggests installing basis-set-exchange on every miss
        try:
            shells = gto.basis.load(basis, symbol)
        except BasisNotFoundError as err:
            raise ChairqmError(f"basis {basis!r} has no functions for element {symbol} ({str(err).strip()}): "
                               "choose a basis that covers every element, e.g. def2-SVP (H-Rn).") from None
        except (KeyError, ValueError, RuntimeError) as err:
            raise ChairqmError(f"basis {basis!r} could not be loaded for {symbol} ({err}): check "
                               "settings.refine.basis.") from None
        if not shells:
            raise ChairqmError(f"basis {basis!r} has no functions for element {symbol}: choose a basis that "
                               "covers every element, e.g. def2-SVP (H-Rn).")
        try:
            ecp = gto.basis.load_ecp(basis, symbol)
        except Exception:  # noqa: BLE001 - a basis without an ECP library raises here
            ecp = []
    return shells, (ecp or [])


def solvent_dielectric(name: str) -> float:
    """Static dielectric constant of a solvent from PySCF's Minnesota solvent descriptor table
    (Marenich, Kelly, Olson, Winget, Cramer, Truhlar, Minnesota Solvent Descriptor Database, 2012);
    tblite-style names (thf, dmso, ch2cl2, ...) are mapped.  ChairqmError if the solvent is not listed."""
    _require_pyscf()
    from pyscf.solvent.smd import solvent_db
    key = str(name).strip()
    key = _SOLVENT_ALIASES.get(key.lower(), key)
    table = {k.lower(): k for k in solvent_db}
    if key.lower() not in table:
        raise ChairqmError(f"solvent {name!r} has no dielectric constant in PySCF's solvent table, so "
                           "solvent_model pcm cannot treat it: set settings.refine.solvent_model: gfn2-delta."
                           + did_you_mean(key, table))
    return float(solvent_db[table[key.lower()]][5])


def solvent_name(solvent) -> str | None:
    """The solvent's name from settings.solvent ({model, name}), a plain name, or None."""
    if solvent is None:
        return None
    if isinstance(solvent, dict):
        return None if solvent.get("name") is None else str(solvent["name"])
    return str(solvent)

def check_level(s: dict, elements, charge: int = 0, multiplicity: int = 1, solvent=None) -> None:
    """Raise ChairqmError (saying what to change) unless PySCF can run the level of resolved settings `s`
    (chairqm.refine.resolve) for this molecule: the functional (Libxc via PySCF), DFT-D3 parameters for it,
    a basis with functions for every element, charge and multiplicity that fit the electron count (after
    the ECP cores), and a dielectric constant for a pcm solvent.  No integrals are computed."""
    _require_pyscf()
    check_functional(s["functional"])
    if s["dispersion"] != "none":
        d3_param(s["functional"], s["dispersion"])
    from pyscf.data import elements as pyscf_elements
    symbols = []
    for e in elements:
        z = int(e) if isinstance(e, (int, np.integer)) else pyscf_elements.charge(str(e))
        if z < 1:
            raise ChairqmError(f"unknown element {e!r}")
        symbols.append(pyscf_elements.ELEMENTS[z])
    if not symbols:
        raise ChairqmError("no atoms to refine")
    core = {}
    for sym in sorted(set(symbols)):
        _shells, ecp = basis_for(s["basis"], sym)
        core[sym] = int(ecp[0]) if ecp else 0
    if int(multiplicity) < 1:
        raise ChairqmError(f"multiplicity must be at least 1, got {multiplicity}")
    n_elec = sum(pyscf_elements.charge(x) - core[x] for x in symbols) - int(charge)
    unpaired = int(multiplicity) - 1
    if n_elec < unpaired or (n_elec - unpaired) % 2:
        raise ChairqmError(f"charge {charge} and multiplicity {multiplicity} do not fit {n_elec} electrons "
                           f"(odd electron counts need an even multiplicity and the reverse): fix the "
                           "molecule's charge or multiplicity.")
    name = solvent_name(solvent)
    if name is not None and s["solvent_model"] == "pcm":
        solvent_dielectric(name)


@contextlib.contextmanager
def _pyscf_environment(threads: int, scratch_dir):
    """Set PySCF's OpenMP thread count and scratch folder for the duration, then restore them."""
    from pyscf import lib
    old_threads = lib.num_threads()
    old_tmp = lib.param.TMPDIR
    try:
        lib.num_threads(int(threads))
        if scratch_dir is not None:
            os.makedirs(scratch_dir, exist_ok=True)
            lib.param.TMPDIR = str(scratch_dir)
        yield
    finally:
        lib.num_threads(old_threads)
        lib.param.TMPDIR = old_tmp


def dispersion_energy(numbers, positions_angstrom, functional: str, dispersion: str = "d3bj") -> float:
    """DFT-D3 dispersion energy in hartree (two-body, the functional's published damping parameters) from
    simple-dftd3; 0.0 for dispersion 'none'.  positions in Å."""
    if dispersion == "none":
        return 0.0
    if dispersion not in ("d3bj", "d3zero"):
        raise ChairqmError(f"unknown dispersion {dispersion!r}: choose one of d3bj, d3zero, none.")
    param = d3_param(functional, dispersion)
    d3 = _require_dftd3()
    model = d3.DispersionModel(np.asarray(numbers, dtype=int),
                               np.asarray(positions_angstrom, dtype=float) / BOHR_A)
    return float(model.get_dispersion(param, grad=False)["energy"])


def build_mole(atoms, charge: int, multiplicity: int, basis: str, max_memory_mb: int = 2000):
    """A built pyscf.gto.Mole for ASE Atoms (Å), with the basis's ECPs where it has them, output off."""
    from pyscf import gto
    symbols = atoms.get_chemical_symbols()
    ecp = {}
    for sym in sorted(set(symbols)):
        _shells, e = basis_for(basis, sym)
        if e:
            ecp[sym] = basis
    mol = gto.Mole()
    mol.atom = [(sym, tuple(float(x) for x in pos)) for sym, pos in zip(symbols, atoms.get_positions())]
    mol.unit = "Angstrom"
    mol.basis = basis
    mol.ecp = ecp
    mol.charge = int(charge)
    mol.spin = int(multiplicity) - 1
    mol.max_memory = int(max_memory_mb)
    mol.verbose = 0
    mol.symmetry = False
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        mol.build(dump_input=False, parse_arg=False)
    return mol


def _scf_object(mol, s, multiplicity, eps):
    from pyscf import dft, scf
    restricted = int(multiplicity) == 1
    if is_hf(s["functional"]):
        mf = scf.RHF(mol) if restricted else scf.UHF(mol)
    else:
        mf = dft.RKS(mol) if restricted else dft.UKS(mol)
        mf.xc = s["functional"]
        mf.grids.level = s["grid_level"]
    if s["density_fitting"]:
        mf = mf.density_fit()
    if eps is not None:
        mf = mf.PCM()
        mf.with_solvent.method = "C-PCM"
        mf.with_solvent.eps = float(eps)
    mf.conv_tol = s["conv_tol"]
    mf.max_cycle = s["max_cycle"]
    mf.verbose = 0
    mf.chkfile = None
    return mf


def single_point(atoms, charge: int, multiplicity: int, settings=None, threads: int = 1, scratch_dir=None,
                 solvent=None) -> dict:
    """One DFT single point of ASE Atoms (Å) with PySCF; a plain dict, never raises for an SCF problem.

    settings: the settings.refine block (defaults filled by :func:`chairqm.refine.resolve`).  solvent: the run's
    settings.solvent ({model, name}, a name, or None); it enters the SCF only when
    solvent_model is 'pcm' (with 'gfn2-delta' the single point is in the gas phase and the caller adds
    :func:`xtb_solvation_hartree`).  threads: OpenMP threads for PySCF (restored afterwards).
    scratch_dir: folder for PySCF's temporary files (integrals that do not fit in memory).

    SCF: DIIS for up to max_cycle iterations; if that does not converge, one second-order (Newton) run
    from the last density.  Returns
      energy_hartree  e_scf + e_disp, or None when the SCF did not converge or failed
      e_scf           SCF total energy (incl. C-PCM solvation with 'pcm'); the last value if unconverged
      e_disp          DFT-D3 energy (0.0 for none)
      converged, cycles (SCF iterations, fallback included), seconds, message ('' when all went well)
      functional, basis, auxbasis, dispersion, solvent_model ('gas' | 'pcm'), dielectric, grid_level,
      n_basis, spin_square (<S^2> for open shells, else None), threads, pyscf_version, dftd3_version
    ChairqmError only for settings the user must change (see :func:`chairqm.refine.check`).
    """
    from chairqm import refine

    s = refine.resolve(settings)
    symbols = atoms.get_chemical_symbols()
    refine.check(s, symbols, charge, multiplicity, solvent)
    pyscf = _require_pyscf()
    name = solvent_name(solvent)
    eps = solvent_dielectric(name) if (name is not None and s["solvent_model"] == "pcm") else None
    out = {"energy_hartree": None, "e_scf": None, "e_disp": None, "converged": False, "cycles": 0,
           "seconds": 0.0, "message": "", "functional": s["functional"], "basis": s["basis"], "auxbasis": None,
           "dispersion": s["dispersion"], "solvent_model": "pcm" if eps is not None else "gas",
           "dielectric": eps, "grid_level": None if is_hf(s["functional"]) else s["grid_level"],
           "density_fitting": s["density_fitting"], "n_basis": None, "spin_square": None,
           "threads": int(threads), "pyscf_version": pyscf.__version__, "dftd3_version": _dftd3_version()}
    t0 = time.perf_counter()
    try:
        out["e_disp"] = dispersion_energy(atoms.get_atomic_numbers(), atoms.get_positions(), s["functional"],
                                          s["dispersion"])
    except ChairqmError:
        raise
    except Exception as err:  # noqa: BLE001 - a library failure on this geometry is the conformer's failure
        out["message"] = f"dispersion failed: {type(err).__name__}: {err}"
        out["seconds"] = time.perf_counter() - t0
        return out
    with _pyscf_environment(threads, scratch_dir):
        mf = None
        try:
            mol = build_mole(atoms, charge, multiplicity, s["basis"], s["max_memory_mb"])
            out["n_basis"] = int(mol.nao_nr())
            mf = _scf_object(mol, s, multiplicity, eps)
            if s["density_fitting"]:
                df_obj = getattr(mf, "with_df", None)
                out["auxbasis"] = getattr(df_obj, "auxbasis", None) if df_obj is not None else None
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                e = mf.kernel()
                cycles = int(getattr(mf, "cycles", 0) or 0)
                notes = []
                if not mf.converged:
                    notes.append(f"SCF not converged in {s['max_cycle']} DIIS iterations; second-order fallback")
                    mf2 = mf.newton()
                    mf2.max_cycle = s["max_cycle"]
                    e = mf2.kernel(mf.make_rdm1())
                    cycles += int(getattr(mf2, "cycles", 0) or 0)
                    mf = mf2
                    notes.append("converged with the second-order fallback" if mf.converged else
                                 "second-order fallback did not converge either")
            if out["auxbasis"] is None and s["density_fitting"]:
                out["auxbasis"] = getattr(getattr(mf, "with_df", None), "auxbasis", None)
            out["e_scf"] = float(e)
            out["converged"] = bool(mf.converged) and math.isfinite(float(e))
            out["cycles"] = cycles
            out["message"] = "; ".join(notes)
            if int(multiplicity) > 1:
                out["spin_square"] = float(mf.spin_square()[0])
            if out["converged"]:
                out["energy_hartree"] = out["e_scf"] + out["e_disp"]
        except ChairqmError:
            raise
        except Exception as err:  # noqa: BLE001 - an SCF or integral failure is this conformer's failure
            out["converged"] = False
            out["energy_hartree"] = None
            out["message"] = f"SCF failed: {type(err).__name__}: {err}"
    if out["auxbasis"] is not None and not isinstance(out["auxbasis"], str):
        out["auxbasis"] = str(out["auxbasis"])
    out["seconds"] = time.perf_counter() - t0
    return out


def _dftd3_version():
    import importlib.metadata
    try:
        return importlib.metadata.version("dftd3")
    except importlib.metadata.PackageNotFoundError:
        return None


def versions() -> dict:
    """{'pyscf': version or None, 'dftd3': version or None} from package metadata (no import)."""
    import importlib.metadata
    out = {}
    for dist in ("pyscf", "dftd3"):
        try:
            out[dist] = importlib.metadata.version(dist)
        except importlib.metadata.PackageNotFoundError:
            out[dist] = None
    return out


def xtb_solvation_hartree(atoms, engine_settings: dict) -> float:
    """GFN2-xTB solvation free energy at a fixed geometry: E(solvated) − E(gas), in hartree (0.0 without a
    solvent).  engine_settings: {engine, method, solvent, accuracy, electronic_temperature, charge,
    multiplicity} as chairqm.stages.engine_settings makes it.  Two SCFs with chairqm.engine; the implicit
    solvent model is the run's own (ALPB: Ehlert, Stahn, Spicher, Grimme, J. Chem. Theory Comput. 2021, 17,
    4250; or GBSA), so its free energy of solvation is the one the GFN2-xTB free energies already contain.
    """
    from ase.units import Hartree
    from chairqm import engine

    es = engine_settings
    if es.get("solvent") is None:
        return 0.0
    energies = []
    for solvent in (es["solvent"], None):
        calc = engine.make_calculator(es["engine"], es["method"], es["charge"], es["multiplicity"], solvent,
                                      es.get("accuracy", 1.0), es.get("electronic_temperature", 300.0))
        a = atoms.copy()
        a.calc = calc
        energies.append(a.get_potential_energy() / Hartree)
    return float(energies[0] - energies[1])
