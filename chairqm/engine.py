"""Engine adapter: one ASE calculator for (engine, method, charge, multiplicity, solvent, accuracy, Tel).

Two engines compute the same published methods:

- ``tblite`` (default): GFN2-xTB [Bannwarth, Ehlert, Grimme, J. Chem. Theory Comput. 2019, 15, 1652]
  and GFN1-xTB [Grimme, Bannwarth, Shushkov, J. Chem. Theory Comput. 2017, 13, 1989]; implicit solvent
  ALPB [Ehlert, Stahn, Spicher, Grimme, J. Chem. Theory Comput. 2021, 17, 4250] and GBSA.
- ``xtb-python`` (PyPI ``xtb``): the same two methods, GBSA only (no ALPB).

Solvent names are taken from the installed packages, not typed by hand:

- tblite keeps one parameter set per (method, model, solvent) in its shared library, compiled in as
  symbols ``__tblite_solvation_data_{alpb,cds,shift}_MOD_gfn<1|2>_[alpb_]<solvent>`` (GBSA sets have no
  ``alpb_`` infix).  :func:`valid_solvents` reads these symbol names from the library file, which needs no
  import of tblite; a solvent counts only if all three parts (Born radii, CDS, shift) exist.  A name not
  in that list (an alias such as ``h2o``) is put to tblite itself before it is rejected.
- xtb-python's own name table (``xtb.utils``) lists its GBSA solvents; each is tried on H2 for the chosen
  method, because some are parametrised for GFN2-xTB only (GFN1-xTB has no ``dmf`` or ``n-hexane``).

xtb-python turns an unknown solvent name into the gas phase without a word, so every solvent goes through
:func:`check_settings` before a calculator is built.  Engines are imported lazily (inside functions), so
this module imports without xtb-python installed and :func:`set_threads` can still take effect.
"""

from __future__ import annotations

import difflib
import functools
import glob
import importlib.metadata
import importlib.util
import os
import re
import sys
import time

from ase.calculators.calculator import Calculator, CalculationFailed, all_changes
from ase.units import Bohr, Hartree

from chairqm.errors import ChairqmError

ENGINES = ("tblite", "xtb-python")
METHODS = {
    "tblite": ("GFN2-xTB", "GFN1-xTB"),
    "xtb-python": ("GFN2-xTB", "GFN1-xTB"),
}
SOLVENT_MODELS = {
    "tblite": ("alpb", "gbsa"),
    "xtb-python": ("gbsa",),
}
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")

_ENGINE_MODULES = {"tblite": "tblite", "xtb-python": "xtb"}
_ENGINE_DISTRIBUTIONS = {"tblite": "tblite", "xtb-python": "xtb"}

# Fallback only, used when the tblite library file cannot be read for its parameter-set symbols (e.g. a
# stripped build).  Measured for tblite 0.8.0 on this machine; tests/test_engine.py checks that the
# symbol scan and this table agree while the symbols are readable, and that every name really works.
_TBLITE_SOLVENTS_0_8 = {
    "alpb": ("acetone", "acetonitrile", "aniline", "benzaldehyde", "benzene", "ch2cl2", "chcl3", "cs2",
             "dioxane", "dmf", "dmso", "ethanol", "ether", "ethylacetate", "furane", "hexadecane", "hexane",
             "methanol", "nitromethane", "octanol", "phenol", "thf", "toluene", "water", "woctanol"),
    ("gbsa", "GFN2-xTB"): ("acetone", "acetonitrile", "benzene", "ch2cl2", "chcl3", "cs2", "dmf", "dmso",
                           "ether", "hexane", "methanol", "thf", "toluene", "water"),
    ("gbsa", "GFN1-xTB"): ("acetone", "acetonitrile", "benzene", "ch2cl2", "chcl3", "cs2", "dmso",
                           "ether", "methanol", "thf", "toluene", "water"),
}


# ----------------------------------------------------------------------------------------------- threads
def set_threads(n: int) -> bool:
    """Set the OpenMP/BLAS thread count for both engines.

    Only effective before tblite or xtb-python is imported (their OpenMP runtimes read the variables once
    at load time); call it first thing in a process.  Returns True if it can take effect, False if an engine
    was already imported (the variables are still set, for child processes).
    """
    n = int(n)
    if n < 1:
        raise ChairqmError(f"thread count must be at least 1, got {n}")
    for var in THREAD_VARIABLES:
        os.environ[var] = str(n)
    return not any(m in sys.modules for m in ("tblite", "tblite.interface", "xtb", "xtb.interface"))


# ------------------------------------------------------------------------------------ names and checking
def _did_you_mean(name: str, valid) -> str:
    close = difflib.get_close_matches(str(name).lower(), [v.lower() for v in valid], n=3, cutoff=0.6)
    return f" Did you mean {' or '.join(repr(c) for c in close)}?" if close else ""


def _check_engine(engine: str) -> None:
    if engine not in ENGINES:
        raise ChairqmError(f"unknown engine {engine!r}: choose one of {', '.join(ENGINES)}."
                           + _did_you_mean(engine, ENGINES))


def canonical_method(engine: str, method: str) -> str:
    """The method's spelling in METHODS (case and '-' insensitive); ChairqmError if the engine lacks it."""
    _check_engine(engine)
    key = str(method).lower().replace("-", "").replace("_", "")
    for m in METHODS[engine]:
        if m.lower().replace("-", "") == key:
            return m
    raise ChairqmError(f"unknown method {method!r} for engine {engine}: choose one of "
                       f"{', '.join(METHODS[engine])}." + _did_you_mean(method, METHODS[engine]))


def _require_engine(engine: str) -> None:
    """Raise a clear error if the engine's Python package is not installed (without importing it)."""
    if importlib.util.find_spec(_ENGINE_MODULES[engine]) is None:
        if engine == "xtb-python":
            raise ChairqmError("engine 'xtb-python' is selected but the 'xtb' package is not installed "
                               "(it ships wheels for CPython 3.11 only): pip install xtb, or set engine: tblite.")
        raise ChairqmError("engine 'tblite' is selected but the 'tblite' package is not installed: "
                           "pip install tblite.")


@functools.lru_cache(maxsize=None)
def _tblite_symbol_table() -> dict:
    """{(model, method): names} from the parameter-set symbols in tblite's shared library ({} if unreadable)."""
    spec = importlib.util.find_spec("tblite")
    if spec is None or not spec.submodule_search_locations:
        return {}
    found: dict = {}
    pattern = re.compile(rb"__tblite_solvation_data_(alpb|cds|shift)_MOD_gfn([12])_(alpb_)?([a-z0-9]+)\x00")
    for folder in spec.submodule_search_locations:
        for path in glob.glob(os.path.join(folder, "_libtblite*")):
            try:
                with open(path, "rb") as fh:
                    data = fh.read()
            except OSError:
                continue
            for part, gfn, alpb, name in pattern.findall(data):
                key = ("alpb" if alpb else "gbsa", f"GFN{gfn.decode()}-xTB")
                found.setdefault(key, {}).setdefault(name.decode(), set()).add(part)
    return {key: tuple(sorted(n for n, parts in names.items() if parts == {b"alpb", b"cds", b"shift"}))
            for key, names in found.items()}


@functools.lru_cache(maxsize=None)
def _xtb_python_solvents(method: str) -> tuple:
    """xtb-python's solvent names that its library accepts for this method (tried on H2)."""
    import numpy as np
    from xtb.interface import Calculator as _XCalc, XTBException
    from xtb.libxtb import VERBOSITY_MUTED
    from xtb.utils import _solvents, get_method, get_solvent

    ok = []
    for name in sorted(_solvents):
        calc = _XCalc(get_method(method), np.array([1, 1]), np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 1.4]]))
        calc.set_verbosity(VERBOSITY_MUTED)
        try:
            calc.set_solvent(get_solvent(name))
        except XTBException:
            continue
        ok.append(name)
    return tuple(ok)


def valid_solvents(engine: str, model: str, method: str = "GFN2-xTB") -> list[str]:
    """The solvent names the engine accepts for this implicit-solvent model and method, sorted.

    model is 'alpb' or 'gbsa'.  For an engine without the model (ALPB with xtb-python) the list is empty.
    tblite also accepts a few aliases not listed here (e.g. 'h2o'); :func:`check_settings` asks tblite
    about any unlisted name before rejecting it.
    """
    _check_engine(engine)
    method = canonical_method(engine, method)
    model = str(model).lower()
    if model not in ("alpb", "gbsa"):
        raise ChairqmError(f"unknown solvent model {model!r}: choose alpb or gbsa.")
    if model not in SOLVENT_MODELS[engine]:
        return []
    _require_engine(engine)
    if engine == "tblite":
        table = _tblite_symbol_table()
        names = table.get((model, method))
        if names is None:
            names = _TBLITE_SOLVENTS_0_8["alpb"] if model == "alpb" else _TBLITE_SOLVENTS_0_8[(model, method)]
        return list(names)
    return list(_xtb_python_solvents(method))


@functools.lru_cache(maxsize=None)
def _tblite_accepts(model: str, method: str, name: str) -> bool:
    """Ask tblite itself whether it builds this solvent model (for aliases outside the symbol table)."""
    import numpy as np
    from tblite.interface import Calculator as _TCalc

    calc = _TCalc(method, np.array([1, 1]), np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 1.4]]))
    calc.set("verbosity", 0)
    try:
        calc.add(f"{model}-solvation", name)
    except Exception:  # tblite raises its own RuntimeError subclass on an unknown name
        return False
    return True


def _normalise_solvent(solvent) -> dict | None:
    if solvent is None:
        return None
    if not isinstance(solvent, dict) or "model" not in solvent or "name" not in solvent:
        raise ChairqmError("solvent must be null (gas phase) or {model: alpb|gbsa, name: <solvent>}, "
                           f"got {solvent!r}")
    return {"model": str(solvent["model"]).lower(), "name": str(solvent["name"]).strip().lower()}


def check_settings(engine: str, method: str, solvent: dict | None = None) -> None:
    """Raise ChairqmError (saying what to change) unless the engine can run this method and solvent.

    Checks: the engine is known and installed; the method is one of METHODS[engine]; the solvent is None or
    {model, name} with a model the engine has (ALPB needs tblite) and a name the engine accepts.  Fast: it
    does not import tblite for a listed name; xtb-python's names need one import of xtb (≈ 0.2 s).
    """
    _check_engine(engine)
    method = canonical_method(engine, method)
    _require_engine(engine)
    solvent = _normalise_solvent(solvent)
    if solvent is None:
        return
    model, name = solvent["model"], solvent["name"]
    if model not in ("alpb", "gbsa"):
        raise ChairqmError(f"unknown solvent model {solvent['model']!r}: choose alpb or gbsa.")
    if model not in SOLVENT_MODELS[engine]:
        raise ChairqmError("xtb-python has no ALPB solvation: use engine tblite for ALPB, "
                           f"or solvent model gbsa with xtb-python.")
    valid = valid_solvents(engine, model, method)
    if name in valid:
        return
    if engine == "tblite" and _tblite_accepts(model, method, name):
        return
    raise ChairqmError(f"solvent {solvent['name']!r} is not known to {engine} for {model.upper()} with {method}."
                       + _did_you_mean(name, valid) + f" Valid names: {', '.join(valid)}.")


# ---------------------------------------------------------------------------------------------- versions
def engine_versions() -> dict:
    """{'tblite': version or None, 'xtb-python': version or None} from package metadata (no import)."""
    out = {}
    for engine, dist in _ENGINE_DISTRIBUTIONS.items():
        try:
            out[engine] = importlib.metadata.version(dist)
        except importlib.metadata.PackageNotFoundError:
            out[engine] = None
    return out


# ---------------------------------------------------------------------------------------- calculators
class XTBPythonCalculator(Calculator):
    """ASE calculator on xtb-python's API with explicit charge, multiplicity and a checked GBSA solvent.

    xtb-python's own ASE class takes charge and spin from the atoms' initial charges/moments and maps an
    unknown solvent to the gas phase; this one takes them as parameters and raises instead.
    """

    implemented_properties = ["energy", "free_energy", "forces", "dipole", "charges"]
    default_parameters = {"method": "GFN2-xTB", "charge": 0, "multiplicity": 1, "accuracy": 1.0,
                          "electronic_temperature": 300.0, "max_iterations": 250, "solvent": None}

    def __init__(self, **kwargs):
        Calculator.__init__(self, **kwargs)
        self._api = None
        self._res = None

    def set(self, **kwargs):
        changed = Calculator.set(self, **kwargs)
        if changed:
            self._api = None
            self._res = None
        return changed

    def _build(self):
        from xtb.interface import Calculator as _XCalc, XTBException
        from xtb.libxtb import VERBOSITY_MUTED
        from xtb.utils import get_method, get_solvent

        p = self.parameters
        param = get_method(p.method)
        if param is None:
            raise ChairqmError(f"xtb-python does not know method {p.method!r}")
        try:
            api = _XCalc(param, self.atoms.numbers, self.atoms.positions / Bohr,
                         float(p.charge), int(p.multiplicity) - 1)
            api.set_verbosity(VERBOSITY_MUTED)
            api.set_accuracy(float(p.accuracy))
            api.set_electronic_temperature(float(p.electronic_temperature))
            api.set_max_iterations(int(p.max_iterations))
            if p.solvent:
                enum = get_solvent(p.solvent)
                if enum is None:
                    raise ChairqmError(f"xtb-python does not know solvent {p.solvent!r}")
                api.set_solvent(enum)
        except XTBException as exc:
            raise CalculationFailed(f"xtb-python could not set up the calculation: {exc}") from exc
        return api

    def calculate(self, atoms=None, properties=("energy",), system_changes=all_changes):
        from xtb.interface import XTBException

        Calculator.calculate(self, atoms, properties, system_changes)
        rebuild = set(system_changes) - {"positions"}
        try:
            if self._api is None or rebuild:
                self._api = self._build()
                self._res = None
            else:
                self._api.update(self.atoms.positions / Bohr)
            self._res = self._api.singlepoint(self._res)
        except XTBException as exc:
            self._api = None
            self._res = None
            raise CalculationFailed(str(exc)) from exc
        res = self._res
        self.results["energy"] = res.get_energy() * Hartree
        self.results["free_energy"] = self.results["energy"]
        self.results["forces"] = -res.get_gradient() * Hartree / Bohr
        self.results["dipole"] = res.get_dipole() * Bohr
        self.results["charges"] = res.get_charges()


def make_calculator(engine: str = "tblite", method: str = "GFN2-xTB", charge: int = 0, multiplicity: int = 1,
                    solvent: dict | None = None, accuracy: float = 1.0,
                    electronic_temperature: float = 300.0, max_iterations: int = 250) -> Calculator:
    """A fresh ASE calculator for the engine and settings, with the engine's output switched off.

    solvent: None (gas phase) or {'model': 'alpb'|'gbsa', 'name': ...}; checked by :func:`check_settings`.
    electronic_temperature in K (Fermi smearing of the SCF occupations).
    """
    check_settings(engine, method, solvent)
    method = canonical_method(engine, method)
    solvent = _normalise_solvent(solvent)
    if int(multiplicity) < 1:
        raise ChairqmError(f"multiplicity must be at least 1, got {multiplicity}")
    if engine == "tblite":
        from tblite.ase import TBLite

        kwargs = dict(method=method, charge=int(charge), multiplicity=int(multiplicity),
                      accuracy=float(accuracy), electronic_temperature=float(electronic_temperature),
                      max_iterations=int(max_iterations), verbosity=0)
        if solvent is not None:
            kwargs["solvation"] = (solvent["model"], solvent["name"])
        return TBLite(**kwargs)
    return XTBPythonCalculator(method=method, charge=int(charge), multiplicity=int(multiplicity),
                               accuracy=float(accuracy), electronic_temperature=float(electronic_temperature),
                               max_iterations=int(max_iterations),
                               solvent=None if solvent is None else solvent["name"])


class CountingCalculator(Calculator):
    """Wraps an engine calculator and accounts its work: `calls` single points (each gives energy and
    gradient) and `seconds` of wall time spent inside the engine.  Use one per conformer (or per attempt)
    and sum; the inner calculator must not be used around it."""

    implemented_properties = ["energy", "free_energy", "forces"]

    def __init__(self, inner: Calculator):
        Calculator.__init__(self)
        self.inner = inner
        self.calls = 0
        self.seconds = 0.0
        self.last_error = None   # the last exception the engine raised (to tell engine from optimiser errors)

    def calculate(self, atoms=None, properties=("energy",), system_changes=all_changes):
        Calculator.calculate(self, atoms, properties, system_changes)
        start = time.perf_counter()
        try:
            self.inner.calculate(self.atoms, ["energy", "forces"], system_changes)
        except Exception as exc:
            self.last_error = exc
            raise
        finally:
            self.calls += 1
            self.seconds += time.perf_counter() - start
        self.results = {k: self.inner.results[k] for k in ("energy", "free_energy", "forces")
                        if k in self.inner.results}
        self.results.setdefault("free_energy", self.results["energy"])
