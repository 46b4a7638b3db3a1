"""Checks every perceived molecule must pass before anything is computed: size limits (heavy atoms,
rotatable bonds; `settings.limits`, defaults in the schema) and no isotope labels."""

from __future__ import annotations

from .errors import ChairqmError


def problems(p, settings: dict | None) -> list[str]:
    """Why the perceived molecule `p` cannot be run with these settings (empty when it can)."""
    from . import config as cq_config
    limits = dict(cq_config.settings_defaults()["limits"])
    limits.update((settings or {}).get("limits") or {})
    mol = p.mol
    out = []
    heavy = sum(1 for a in mol.GetAtoms() if a.GetAtomicNum() > 1)
    cap = int(limits["max_heavy_atoms"])
    if cap and heavy > cap:
        out.append(f"{p.name}: {heavy} heavy atoms, above the limit of {cap} (settings.limits.max_heavy_atoms; "
                   "raise it, or set 0 for no limit, if the cost is intended)")
    cap = int(limits["max_rotatable_bonds"])
    if cap:
        from .rotamers import rotatable_bonds
        n = len(rotatable_bonds(mol, p.ring, p.substituents))
        if n > cap:
            out.append(f"{p.name}: {n} rotatable bonds, above the limit of {cap} "
                       "(settings.limits.max_rotatable_bonds; raise it, or set 0 for no limit, if the cost is intended)")
    formal = sum(a.GetFormalCharge() for a in mol.GetAtoms())
    if formal != p.charge:
        out.append(f"{p.name}: 'charge: {p.charge}' disagrees with the formal charges written in the structure "
                   f"(sum {formal:+d}): correct the charge, or the structure file's charges")
    labelled = [f"{a.GetIsotope()}{a.GetSymbol()} (atom {a.GetIdx()})" for a in mol.GetAtoms() if a.GetIsotope()]
    if labelled:
        out.append(f"{p.name}: isotope label(s) {', '.join(labelled[:5])}{' ...' if len(labelled) > 5 else ''}: "
                   "chairqm computes with the standard atomic masses, so an isotope effect would be silently "
                   "lost; remove the labels")
    return out


def check(p, settings: dict | None) -> None:
    """Raise ChairqmError (one line per problem) when `p` fails :func:`problems`."""
    found = problems(p, settings)
    if found:
        raise ChairqmError("\n".join(found))
