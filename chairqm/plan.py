"""Which molecules a validated configuration asks for: the user's, expanded stereoisomers, and reference rings."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .errors import ChairqmError
from .molecule import Perceived, perceive

REFERENCE_PREFIX = "ref-"


@dataclass
class Plan:
    molecules: list[Perceived]        # user molecules, then automatic reference molecules
    problems: list[str]               # one line per input problem (empty when the plan is usable)
    # same-method A-values taken from the reference cache instead of a reference ring of this run:
    # fragment -> {temperature: A-value} (chairqm.reference_cache)
    cached: dict = field(default_factory=dict)
    # settings.refine as configured (None: no refinement), and under refine: auto each molecule's
    # decision, name -> {"refine": bool, "reason": str, "reasons": [str]} (chairqm.refine.auto_decision)
    refine: object = None
    refine_auto: dict = field(default_factory=dict)

    def names(self) -> list[str]:
        return [m.name for m in self.molecules]

    def refines(self, name: str) -> bool:
        """Whether the refine stage runs for molecule `name`: always with a refinement block, never
        without one, and under refine: auto as decided for it."""
        if self.refine is None:
            return False
        decision = self.refine_auto.get(name)
        return True if decision is None else bool(decision["refine"])

    def refine_decision(self, name: str) -> dict | None:
        """The refine: auto decision for `name` ({"refine", "reason", "reasons"}); None without auto."""
        return self.refine_auto.get(name)

    def get(self, name: str) -> Perceived:
        for m in self.molecules:
            if m.name == name:
                return m
        raise ChairqmError(f"no molecule named {name!r} in this configuration")

    def references_for(self, name: str) -> dict[str, str]:
        """fragment -> name of the molecule whose computed A-value serves as the same-method (QM-derived)
        value, for the groups of `name` on ring carbons (every group: the tabulated ones too). A
        monosubstituted cyclohexane defines its own group's value and never waits for another molecule (so
        no two molecules can wait for each other). Groups whose value comes from the reference cache are
        in `cached`, not here."""
        from .additivity import needs_reference
        mol = self.get(name)
        if _is_mono_cyclohexane(mol):
            return {}
        refs = {}
        for m in sorted(self.molecules, key=lambda m: (not m.reference, m.name)):
            if _is_mono_cyclohexane(m):
                refs.setdefault(m.substituents[0].fragment, m.name)
        wanted = needs_reference(_on_ring_carbon(mol), every_group=True)
        return {f: refs[f] for f in wanted if f in refs}


def _is_mono_cyclohexane(m) -> bool:
    return len(m.substituents) == 1 and m.ring_elements == ["C"] * 6


def _slug(fragment: str) -> str:
    import hashlib
    import re
    s = re.sub(r"[^A-Za-z0-9]+", "", fragment.replace("[*]", ""))[:24] or "group"
    return f"{REFERENCE_PREFIX}{s}-{hashlib.sha1(fragment.encode()).hexdigest()[:6]}"


def make_plan(cfg: dict) -> Plan:
    """Perceive every molecule of a validated config; add reference rings for untabulated groups."""
    settings = cfg.get("settings", {})
    base = Path(cfg.get("_base_dir", "."))
    mols, problems = [], []
    for entry in cfg["molecules"]:
        try:
            mols.extend(perceive_entry(entry, base, settings))
        except ChairqmError as exc:
            problems.append(str(exc))
    # folder names: two that differ only in case are one folder on a case-insensitive file system
    folded = [m.name.casefold() for m in mols]
    for n in sorted({m.name for m, f in zip(mols, folded) if folded.count(f) > 1}, key=str.casefold):
        problems.append(f"molecule name '{n}' occurs twice after stereoisomer expansion (names are compared "
                        "ignoring case, because each becomes a folder): rename one")
    cached = {}
    if settings.get("analysis", {}).get("reference_groups", True) and not problems:
        mols.extend(_reference_molecules(mols, settings, problems, cached))
    block = settings.get("refine")
    return Plan(mols, problems, cached, refine=block, refine_auto=_auto_decisions(mols, settings))


def _reference_settings(frag, settings) -> dict:
    """The settings a reference ring's cached A-value is stored under: the run's, except under
    refine: auto, where the ring's own decision makes them those of an unrefined or a refined run (the
    ensemble stage stores it so, chairqm.refine.molecule_settings)."""
    block = settings.get("refine")
    if not (block == "auto" or isinstance(block, dict) and block.get("auto") is True):
        return settings
    from . import additivity, refine
    try:
        ring = perceive({"name": _slug(frag), "smiles": additivity.reference_smiles(frag), "reference": True},
                        ".", settings)[0]
    except (ChairqmError, IndexError):
        return settings
    return refine.molecule_settings(settings, bool(_auto_decisions([ring], settings)[ring.name]["refine"]))


def _auto_decisions(mols, settings) -> dict:
    """Under settings.refine: auto, each molecule's decision (chairqm.refine.auto_decision) against the
    GFN2-xTB calibration of these settings without refinement (the one the unrefined molecules use);
    {} otherwise. Made here, once, so that the workflow asks for refine jobs of the chosen molecules only
    and every stage job sees the same decision."""
    block = settings.get("refine")
    if not (block == "auto" or isinstance(block, dict) and block.get("auto") is True):
        return {}                   # (chairqm.refine.is_auto, without importing the DFT modules)
    from . import refine
    from . import calibration
    cal = calibration.load_matching(refine.molecule_settings(settings, refined=False))
    return {m.name: refine.auto_decision(m, cal) for m in mols}


def perceive_entry(entry: dict, base, settings: dict) -> list[Perceived]:
    """One configuration entry perceived (stereoisomers expanded) and screened (size limits, isotope labels,
    chairqm.screening); raises ChairqmError naming the molecule."""
    from . import screening
    out = perceive(entry, base, settings)
    found = [line for p in out for line in screening.problems(p, settings)]
    if found:
        raise ChairqmError("\n".join(dict.fromkeys(found)))
    return out


def _on_ring_carbon(m):
    """The groups a cyclohexane A-value can describe: singly bonded to a ring carbon (a group on a ring
    heteroatom, or S=O / P=O, has no cyclohexane reference)."""
    elements = dict(zip(m.ring, m.ring_elements))
    return [s for s in m.substituents if elements.get(s.ring_atom) == "C" and not s.fragment.startswith("[*]=")]


def _reference_molecules(mols, settings, problems, cached=None):
    """The reference ring (monosubstituted cyclohexane) of every group on a ring carbon that no molecule of
    the configuration already is, unless the reference cache holds its A-value at every temperature of the
    run and no folder of that reference ring exists here yet (a run that started computing one keeps it,
    so every job of a run sees the same plan). `cached` receives the cached values."""
    from . import additivity, reference_cache
    have = {m.substituents[0].fragment for m in mols if len(m.substituents) == 1
            and m.ring_elements == ["C"] * 6}
    temps = settings.get("temperatures_k") or [298.15]
    out = []
    for frag in sorted({f for m in mols if not m.reference
                        for f in additivity.needs_reference(_on_ring_carbon(m), every_group=True)}):
        if frag in have or frag == "[*][H]":
            continue
        if not Path(_slug(frag)).exists():
            hit = reference_cache.lookup(frag, _reference_settings(frag, settings), temps)
            if hit is not None:
                if cached is not None:
                    cached[frag] = hit
                continue
        try:
            smi = additivity.reference_smiles(frag)
            for p in perceive({"name": _slug(frag), "smiles": smi, "reference": True,
                               "note": f"reference ring for the group {frag}"}, ".", settings):
                out.append(p)
        except ChairqmError as exc:
            problems.append(f"cannot build the reference ring for group {frag}: {exc}")
    return out
