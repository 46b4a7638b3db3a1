"""Ideal-gas thermochemistry of one conformer: RRHO and quasi-RRHO terms at one temperature.

- :func:`thermochemistry`: zero-point energy, enthalpy and entropy terms and G − E_elec at one
  temperature, in hartree (entropies in hartree/K), for the rigid-rotor harmonic-oscillator model or the
  quasi-RRHO interpolations; the electronic energy is added by the caller.  The rotational symmetry
  number it needs comes from :mod:`chairqm.symmetry`.

Statistical mechanics of the ideal gas as in McQuarrie, *Statistical Mechanics* (1976), ch. 5–8, and
Ochterski, "Thermochemistry in Gaussian" (Gaussian white paper, 2000); the formulas are the ones
ase.thermochemistry.IdealGasThermo implements, which the tests compare against.  Constants: CODATA 2018
through ase.units.create_units('2018').
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from ase import Atoms
from ase.units import create_units

from chairqm.errors import ChairqmError

# CODATA 2018 through ASE: the plain `ase.units` module is still CODATA 2014 in ASE 3.2x, so the 2018 set is
# requested explicitly (the project's convention is CODATA 2018)
units = create_units("2018")

# SI constants
_K = units._k                      # J/K
_H = units._hplanck                # J s
_C = units._c                      # m/s
_AMU = units._amu                  # kg
_HARTREE_J = units.Hartree * units._e   # J per hartree
_KB_HARTREE = _K / _HARTREE_J      # hartree/K

ATM_PA = 101325.0                  # 1 standard atmosphere, Pa (exact by definition)
C_STANDARD_MOL_M3 = 1000.0         # 1 mol/L in mol/m³

MODELS = ("rrho", "qrrho", "qrrho-s", "qrrho-h")
STANDARD_STATES = ("gas", "solution")
IMAGINARY_TREATMENTS = ("invert-small", "invert", "drop", "raise")

#: Quasi-RRHO defaults: ω0 = 100 cm⁻¹, α = 4, B_av = 1e-44 kg m² [Grimme, Chem. Eur. J. 2012, 18, 9955].
OMEGA0_CM1 = 100.0
ALPHA = 4
BAV_KG_M2 = 1.0e-44

#: Imaginary modes with |ν| below this (cm⁻¹) are residual noise of a proven minimum (see
#: chairqm.vibrations.DEFAULT_IMAGINARY_THRESHOLD, the same number) and are counted as real with |ν|.
IMAGINARY_THRESHOLD_CM1 = 15.0
#: The same number is the default noise floor of thermochemistry(): softer modes count at 15 cm⁻¹.



# ==================================================================================== thermochemistry
@dataclass
class ThermoTerms:
    """Thermal terms of one conformer at one temperature (hartree; entropies hartree/K).

    h_corr = zpe + h_trans + h_rot + h_vib: the enthalpy above the electronic energy, with
    h_trans = 5/2 kT (3/2 kT kinetic + kT for pV of the ideal gas), h_rot = 3/2 kT (kT if linear),
    h_vib = vibrational energy above the zero-point energy (model-dependent; in the quasi-RRHO enthalpy
    model it can be below the harmonic value, see :func:`thermochemistry`).
    s_total = s_trans + s_rot + s_vib + s_elec; g_corr = h_corr − T s_total.
    G = E_elec + g_corr, H = E_elec + h_corr.
    """

    temperature_k: float
    model: str
    standard_state: str
    symmetry_number: int
    multiplicity: int
    scale: float
    zpe: float
    h_trans: float
    h_rot: float
    h_vib: float
    h_corr: float
    s_trans: float
    s_rot: float
    s_vib: float
    s_elec: float
    s_total: float
    g_corr: float
    g_standard_state: float = 0.0      # kT ln(RT c°/p°) included via s_trans when standard_state='solution'
    pressure_pa: float = ATM_PA
    n_modes: int = 0                   # vibrations used
    n_dropped: int = 0                 # imaginary modes left out
    n_inverted: int = 0                # imaginary modes counted as real with |ν|
    n_floored: int = 0                 # modes softer than the noise floor, counted at the floor
    noise_floor_cm1: float = 0.0
    lowest_frequency_cm1: float = math.nan   # of the input (unscaled, imaginary negative)
    omega0_cm1: float = OMEGA0_CM1
    alpha: float = ALPHA
    bav_kg_m2: float = BAV_KG_M2

    @property
    def ts_total(self) -> float:
        return self.temperature_k * self.s_total

    def to_record(self) -> dict:
        return asdict(self)


def _x(freq_cm1, temperature):
    """hν/kT for wavenumbers in cm⁻¹."""
    return _H * _C * 100.0 * np.asarray(freq_cm1, dtype=float) / (_K * temperature)


def qrrho_weight(freq_cm1, omega0: float = OMEGA0_CM1, alpha: float = ALPHA):
    """Damping weight w(ν) = 1 / (1 + (ω0/ν)^α) [Head-Gordon damping used by Grimme, Chem. Eur. J. 2012,
    18, 9955, eq. 8]; w(ω0) = ½."""
    nu = np.asarray(freq_cm1, dtype=float)
    return 1.0 / (1.0 + (float(omega0) / nu) ** alpha)


def harmonic_entropy(freq_cm1, temperature: float):
    """Entropy of one harmonic oscillator, hartree/K: S_V = k [x/(eˣ − 1) − ln(1 − e⁻ˣ)], x = hν/kT
    (McQuarrie 1976, ch. 8; Grimme 2012, eq. 4)."""
    x = _x(freq_cm1, temperature)
    return _KB_HARTREE * (x / np.expm1(x) - np.log(-np.expm1(-x)))


def free_rotor_entropy(freq_cm1, temperature: float, bav: float = BAV_KG_M2):
    """Entropy of the free rotor that replaces a low mode, hartree/K [Grimme, Chem. Eur. J. 2012, 18,
    9955, eqs. 5–7]: μ = h/(8π²ν) (ν in Hz), μ' = μ B_av/(μ + B_av), S_R = k [½ + ln((8π³ μ' kT/h²)^½)]."""
    nu_hz = _C * 100.0 * np.asarray(freq_cm1, dtype=float)
    mu = _H / (8.0 * math.pi ** 2 * nu_hz)
    mu_eff = mu * bav / (mu + bav)
    return _KB_HARTREE * (0.5 + 0.5 * np.log(8.0 * math.pi ** 3 * mu_eff * _K * temperature / _H ** 2))


def harmonic_energy(freq_cm1, temperature: float):
    """Mean energy of one harmonic oscillator including its zero-point energy, hartree:
    E = hν (½ + 1/(eˣ − 1)) (McQuarrie 1976, ch. 8)."""
    x = _x(freq_cm1, temperature)
    hnu = _K * temperature * x / _HARTREE_J
    return hnu * (0.5 + 1.0 / np.expm1(x))


def qrrho_entropy(freq_cm1, temperature: float, omega0: float = OMEGA0_CM1, alpha: float = ALPHA,
                  bav: float = BAV_KG_M2):
    """Grimme's quasi-RRHO entropy of a mode, hartree/K: S = w S_V + (1 − w) S_R [Chem. Eur. J. 2012, 18,
    9955, eq. 9]."""
    w = qrrho_weight(freq_cm1, omega0, alpha)
    return w * harmonic_entropy(freq_cm1, temperature) + (1.0 - w) * free_rotor_entropy(freq_cm1, temperature, bav)


def qrrho_energy(freq_cm1, temperature: float, omega0: float = OMEGA0_CM1, alpha: float = ALPHA):
    """Quasi-RRHO vibrational energy of a mode, hartree: E = w E_HO + (1 − w) ½kT, the harmonic mean energy
    (with its zero-point part) damped toward the classical free-rotor energy ½kT with the same weight
    [Li, Gomes, Mallikarjun Sharada, Bell, Head-Gordon, J. Phys. Chem. C 2015, 119, 1840 (from memory:
    their E_v includes the zero-point term)]."""
    w = qrrho_weight(freq_cm1, omega0, alpha)
    return w * harmonic_energy(freq_cm1, temperature) + (1.0 - w) * 0.5 * _KB_HARTREE * temperature


def solution_standard_state_shift(temperature: float, pressure_pa: float = ATM_PA,
                                  concentration_mol_m3: float = C_STANDARD_MOL_M3) -> float:
    """ΔG° (hartree) from the 1 atm ideal-gas standard state to 1 mol/L: kT ln(RT c°/p°), R T c°/p° being
    the ratio of the molar volumes (24.46 at 298.15 K; ΔG° = +1.89 kcal/mol) [e.g. Ben-Naim, *Solvation
    Thermodynamics*, 1987; Bryantsev, Diallo, Goddard, J. Phys. Chem. B 2008, 112, 9709]."""
    r = units._k * units._Nav
    return _KB_HARTREE * temperature * math.log(r * temperature * concentration_mol_m3 / pressure_pa)


def _is_linear(atoms: Atoms, tol: float = 1e-3) -> bool:
    if len(atoms) < 3:
        return True
    moments = np.sort(atoms.get_moments_of_inertia())
    return moments[0] < tol * max(moments[2], 1e-12)


def thermochemistry(freqs_cm1, atoms: Atoms, temperature: float, symmetry_number: int, multiplicity: int = 1,
                    model: str = "qrrho", scale: float = 1.0, standard_state: str = "gas",
                    imaginary: str = "invert-small", imaginary_threshold_cm1: float = IMAGINARY_THRESHOLD_CM1,
                    omega0: float = OMEGA0_CM1, alpha: float = ALPHA, bav: float = BAV_KG_M2,
                    pressure_pa: float = ATM_PA, noise_floor_cm1: float | None = None) -> ThermoTerms:
    """Ideal-gas thermal terms (hartree) of a conformer with vibrational wavenumbers `freqs_cm1`.

    freqs_cm1: the 3N−6 (3N−5 linear) vibrations, imaginary ones negative (as
    chairqm.vibrations.frequencies returns them); they are multiplied by `scale` before use.

    Translation (ideal gas at `pressure_pa`, default 1 atm): H = 5/2 kT,
    S = k [ln((2π m kT/h²)^{3/2} kT/p) + 5/2] (Sackur–Tetrode; McQuarrie 1976, eq. 5-20).
    Rotation (rigid rotor, principal moments of `atoms`, symmetry number σ): nonlinear H = 3/2 kT,
    S = k [ln(√(π I_A I_B I_C)/σ (8π² kT/h²)^{3/2}) + 3/2]; linear H = kT, S = k [ln(8π² I kT/(σ h²)) + 1]
    (McQuarrie 1976, ch. 8).  Electronic: S = k ln(multiplicity), no excited states.
    Vibration, per mode, `model`:

    - 'rrho': harmonic oscillator, E = hν(½ + 1/(eˣ−1)), S_V = k[x/(eˣ−1) − ln(1−e⁻ˣ)], x = hν/kT.
    - 'qrrho-s': entropy S = w S_V + (1−w) S_R with w = 1/(1+(ω0/ν)^α) and the free-rotor entropy S_R of
      μ' = μ B_av/(μ + B_av), μ = h/(8π²ν) [Grimme, Chem. Eur. J. 2012, 18, 9955]; harmonic energy.
    - 'qrrho-h': harmonic entropy; energy E = w E_HO + (1−w) ½kT [Li, Gomes, Mallikarjun Sharada, Bell,
      Head-Gordon, J. Phys. Chem. C 2015, 119, 1840].
    - 'qrrho' (default): both interpolations.

    zpe is always the harmonic Σ ½hν; h_vib = Σ E(model) − zpe, so in 'qrrho'/'qrrho-h' it also holds
    the damping of the soft modes' zero-point energy toward ½kT.

    Standard state: 'gas' = ideal gas at `pressure_pa` (1 atm); 'solution' = 1 mol/L, i.e. the
    translational entropy at the molar volume 1 L/mol instead of RT/p°: s_trans is lowered by
    k ln(RT c°/p°), so G rises by kT ln(RT c°/p°) = +1.89 kcal/mol at 298.15 K (recorded as
    g_standard_state).  It is the same for every conformer of a molecule, so it cancels in relative free
    energies but matters for absolute G.

    Imaginary modes (`imaginary`): 'invert-small' (default) counts a mode with |ν| below
    `imaginary_threshold_cm1` as real with frequency |ν| and leaves out larger imaginary ones (a saddle's
    reaction coordinate has no vibrational partition function); 'invert' takes |ν| for all; 'drop' leaves
    out all; 'raise' refuses any.  Why invert the small ones: after :func:`chairqm.vibrations.prove_minimum`
    they are flat torsions whose curvature sign is within numerical noise; dropping one would remove a
    whole mode's entropy (≈ 2.6 k, 1.5 kcal/mol of −TS at 10 cm⁻¹ as a free rotor) and bias the comparison
    with conformers whose noise happened to be positive, while under quasi-RRHO a mode that soft is
    already ≈ a free rotor.

    Noise floor (`noise_floor_cm1`, default: `imaginary_threshold_cm1`): every kept mode with |ν| below it
    is counted at the floor (before `scale`).  A mode that soft is below what the finite-difference Hessian
    resolves (its sign is noise, so is its size), and the free-rotor entropy still grows as ½ k ln(1/ν)
    there: without the floor, 1.0 against 9.2 cm⁻¹ of noise in two otherwise alike conformers moves G by
    ≈ ½RT ln 9.2, 0.65 kcal/mol at 298 K.  Raising soft modes to a common cut-off is common practice; it
    errs toward less entropy for a mode that is truly that soft.  0 turns it off.
    """
    if model not in MODELS:
        raise ChairqmError(f"unknown thermochemistry model {model!r}: choose one of {', '.join(MODELS)}")
    if standard_state not in STANDARD_STATES:
        raise ChairqmError(f"unknown standard state {standard_state!r}: choose 'gas' (1 atm) or 'solution' (1 mol/L)")
    if imaginary not in IMAGINARY_TREATMENTS:
        raise ChairqmError(f"unknown treatment of imaginary modes {imaginary!r}: choose one of "
                           f"{', '.join(IMAGINARY_TREATMENTS)}")
    temperature = float(temperature)
    if not temperature > 0:
        raise ChairqmError(f"temperature must be positive (K), got {temperature}")
    sigma = int(symmetry_number)
    if sigma < 1:
        raise ChairqmError(f"symmetry number must be a positive integer, got {symmetry_number}")
    if int(multiplicity) < 1:
        raise ChairqmError(f"multiplicity must be at least 1, got {multiplicity}")
    if not scale > 0:
        raise ChairqmError(f"frequency scale factor must be positive, got {scale}")

    freqs = np.asarray(freqs_cm1, dtype=float).ravel()
    natoms = len(atoms)
    linear = natoms > 1 and _is_linear(atoms)
    expected = 0 if natoms == 1 else 3 * natoms - (5 if linear else 6)
    if len(freqs) != expected:
        raise ChairqmError(f"expected {expected} vibrational frequencies for this {'linear ' if linear else ''}"
                           f"{natoms}-atom structure, got {len(freqs)}: pass the vibrations only, without "
                           f"the translations and rotations (chairqm.vibrations.frequencies does this)")
    if np.any(~np.isfinite(freqs)):
        raise ChairqmError("frequencies contain NaN or infinity")

    imag = freqs < 0
    big = imag & (np.abs(freqs) >= imaginary_threshold_cm1)
    if imaginary == "raise" and np.any(imag):
        listed = ", ".join(f"{abs(v):.1f}i" for v in freqs[imag])
        raise ChairqmError(f"{int(imag.sum())} imaginary frequencies ({listed} cm-1): prove the minimum first, "
                           f"or choose another treatment of imaginary modes")
    if imaginary == "drop":
        keep = ~imag
    elif imaginary == "invert":
        keep = np.ones_like(imag)
    else:  # invert-small
        keep = ~big
    n_dropped = int(np.sum(~keep))
    n_inverted = int(np.sum(imag & keep))
    floor = float(imaginary_threshold_cm1 if noise_floor_cm1 is None else noise_floor_cm1)
    if floor < 0:
        raise ChairqmError(f"the noise floor must be 0 (off) or positive, got {floor} cm-1")
    raw = np.abs(freqs[keep])
    floored = raw < floor
    nu = np.where(floored, floor, raw) * float(scale)
    if np.any(nu < 1e-2):
        raise ChairqmError("a vibrational frequency is zero (< 0.01 cm-1): the list probably still contains a "
                           "translation or rotation; pass the 3N-6 vibrations only")

    kt = _KB_HARTREE * temperature
    k = _KB_HARTREE
    # translation (Sackur–Tetrode)
    mass = float(np.sum(atoms.get_masses())) * _AMU
    s_trans = k * (math.log((2 * math.pi * mass * _K * temperature / _H ** 2) ** 1.5
                            * _K * temperature / float(pressure_pa)) + 2.5)
    g_std = 0.0
    if standard_state == "solution":
        g_std = solution_standard_state_shift(temperature, float(pressure_pa))
        s_trans -= g_std / temperature
    h_trans = 2.5 * kt
    # rotation
    if natoms == 1:
        s_rot, h_rot = 0.0, 0.0
    else:
        inertia = np.sort(atoms.get_moments_of_inertia()) * _AMU * 1e-20   # kg m²
        if linear:
            s_rot = k * (math.log(8 * math.pi ** 2 * inertia[2] * _K * temperature / (sigma * _H ** 2)) + 1.0)
            h_rot = kt
        else:
            s_rot = k * (math.log(math.sqrt(math.pi * float(np.prod(inertia))) / sigma
                                  * (8 * math.pi ** 2 * _K * temperature / _H ** 2) ** 1.5) + 1.5)
            h_rot = 1.5 * kt
    s_elec = k * math.log(int(multiplicity))
    # vibration
    hnu = _H * _C * 100.0 * nu / _HARTREE_J
    zpe = float(np.sum(0.5 * hnu))
    if model in ("qrrho", "qrrho-h"):
        e_vib = float(np.sum(qrrho_energy(nu, temperature, omega0, alpha)))
    else:
        e_vib = float(np.sum(harmonic_energy(nu, temperature)))
    if model in ("qrrho", "qrrho-s"):
        s_vib = float(np.sum(qrrho_entropy(nu, temperature, omega0, alpha, bav)))
    else:
        s_vib = float(np.sum(harmonic_entropy(nu, temperature)))
    h_vib = e_vib - zpe
    h_corr = zpe + h_trans + h_rot + h_vib
    s_total = s_trans + s_rot + s_vib + s_elec
    return ThermoTerms(temperature_k=temperature, model=model, standard_state=standard_state,
                       symmetry_number=sigma, multiplicity=int(multiplicity), scale=float(scale), zpe=zpe,
                       h_trans=h_trans, h_rot=h_rot, h_vib=h_vib, h_corr=h_corr, s_trans=s_trans, s_rot=s_rot,
                       s_vib=s_vib, s_elec=s_elec, s_total=s_total, g_corr=h_corr - temperature * s_total,
                       g_standard_state=g_std, pressure_pa=float(pressure_pa), n_modes=int(len(nu)),
                       n_dropped=n_dropped, n_inverted=n_inverted, n_floored=int(np.sum(floored)),
                       noise_floor_cm1=floor,
                       lowest_frequency_cm1=float(freqs.min()) if len(freqs) else math.nan,
                       omega0_cm1=float(omega0), alpha=float(alpha), bav_kg_m2=float(bav))
