"""Unit conversions from one set of constants: CODATA 2018, built by ase.units.create_units("2018").

(`ase.units` itself still defaults to CODATA 2014 in ASE 3.2x; every chairqm module takes its
constants from here so the whole package uses one set.)"""

from ase.units import create_units

_u = create_units("2018")
UNITS = _u

HARTREE_EV = _u.Hartree                     # eV per hartree
KCAL_PER_HARTREE = _u.Hartree / (_u.kcal / _u.mol)   # ≈ 627.5095
KJ_PER_HARTREE = _u.Hartree / (_u.kJ / _u.mol)       # ≈ 2625.50
BOHR_A = _u.Bohr                            # Å per bohr
KB_HARTREE = _u.kB / _u.Hartree             # Boltzmann constant in hartree per kelvin
R_KCAL = _u.kB / (_u.kcal / _u.mol)         # gas constant in kcal/(mol K)


def hartree_to_kcal(x):
    return x * KCAL_PER_HARTREE


def kcal_to_hartree(x):
    return x / KCAL_PER_HARTREE
