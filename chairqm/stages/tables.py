"""The columns of every table a stage writes: the success path and the failure path share these.

The names are a contract users' scripts read (DESIGN.md, "Contracts"): extend, never rename. A column
set that depends on the run depends only on its settings (a refined run has the refined columns whether
or not any single point succeeded), never on how far a molecule got.
"""

from __future__ import annotations

#: the version of the output contract, written to provenance.json as `output_version`. 1: the first
#: contract. 2: a molecule may have a fused ring (its two fusion bonds are substituents whose fragment has
#: two attachment points, '[*]CCCC[*]'; the fused ring is an `other_rings` entry, 'r2=chair:equatorial',
#: a fused five-membered one 'r2=envelope' or 'r2=twist'); seeds screened as 'locked:'; the orientation
#: label 'planar' (a flat ring atom's one exocyclic bond). No column was renamed or removed.
OUTPUT_VERSION = 2


def _refined(settings: dict) -> bool:
    return (settings or {}).get("refine") is not None


def seeds(settings=None) -> list[str]:
    return ["seed", "ring_form", "q", "theta", "phi", "orientation", "ff_energy_kcal", "status", "template", "reason",
            "other_rings"]


def minima(settings=None) -> list[str]:
    return ["conformer", "seed", "ring_form", "q", "theta", "phi", "orientation", "energy_hartree",
            "gradient_calls", "status", "reason", "seed_ring_form", "seed_orientation", "steps",
            "fmax_ev_per_a", "engine_seconds", "other_rings"]


def thermo(settings=None) -> list[str]:
    return ["conformer", "temperature_k", "zpe_hartree", "h_hartree", "s_hartree_per_k", "g_hartree",
            "symmetry_number", "degeneracy", "lowest_frequency_cm1", "n_imaginary", "status",
            "energy_hartree", "g_corr_hartree", "point_group", "model", "rounds", "reason",
            "frequency_checked", "thermal_correction_from"]


def refine(settings=None) -> list[str]:
    return ["conformer", "selected", "energy_hartree", "energy_refined_hartree", "solvation_hartree",
            "converged", "seconds", "status", "reason"]


def families(settings) -> list[str]:
    from ..ensemble import FAMILY_COLUMNS
    return (list(FAMILY_COLUMNS) + (["g_rel_unrefined_kcal", "population_unrefined"] if _refined(settings) else [])
            + ["other_rings"])


def conformers(settings) -> list[str]:
    return (["conformer", "seed", "temperature_k", "ring_form", "q", "theta", "phi", "orientation",
             "energy_hartree", "g_hartree", "g_rel_kcal", "population", "n_imaginary", "status",
             "degeneracy", "symmetry_number", "reason", "other_rings", "frequency_checked", "thermal_correction_from"]
            + (["energy_refined_hartree", "g_refined_hartree", "refined_single_point"] if _refined(settings) else []))


def summary(settings) -> list[str]:
    return (["molecule", "temperature_k", "status", "reason", "n_conformers", "preferred_family",
             "chair_dg_kcal", "a_value_kcal", "twist_boat_population", "additive_dg_kcal",
             "additive_source", "flag", "flag_reason"]
            + ["calibrated_kcal", "interval_low_kcal", "interval_high_kcal", "calibrated_quantity"]
            + (["refined", "chair_dg_unrefined_kcal", "a_value_unrefined_kcal"] if _refined(settings) else [])
            + ["additive_same_method_kcal", "interaction_kcal", "interaction_uncertainty_kcal", "calibration_domain"])


def frame(rows, columns):
    """A DataFrame of `rows` (dicts) with exactly `columns`, in that order."""
    import pandas as pd
    return pd.DataFrame(list(rows), columns=list(columns))
