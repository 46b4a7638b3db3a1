"""Checking a configuration before anything runs, for `chairqm check` and as the first step of every run:
the configuration, its molecules and the engine and refine settings validated (`prepare`), what `chairqm
check` prints (`CheckResult`: the perceived molecules, the settings line, the DFT time estimate), and the
split of a configuration into runnable and refused molecules for `chairqm run --skip-invalid` (`screen`).
Computes nothing. The public names here are also importable from chairqm.api."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from .errors import ChairqmError


def prepare(config):
    """Validate configuration, molecules and engine settings; return (cfg, plan). Raises ChairqmError with
    one line per problem."""
    from . import config as cq_config
    from .plan import make_plan
    cfg = cq_config.load(config) if not isinstance(config, dict) else cq_config.validate(config, base_dir=Path.cwd())
    plan = make_plan(cfg)
    problems = list(plan.problems)
    try:
        from . import engine
    except ImportError:
        engine = None
    if engine is not None:
        s = cfg["settings"]
        try:
            engine.check_settings(s["engine"], s["method"], s.get("solvent"))
        except ChairqmError as exc:
            problems.append(str(exc))
    if not problems and cfg["settings"].get("refine") is not None:
        try:
            from . import refine
            rs = refine.resolve(cfg["settings"]["refine"])
            for m in plan.molecules:
                elements = [a.GetSymbol() for a in m.mol.GetAtoms()]
                try:
                    refine.check(rs, elements, m.charge, m.multiplicity, cfg["settings"].get("solvent"))
                except ChairqmError as exc:
                    problems.append(f"{m.name}: refine: {exc}")
        except ImportError as exc:
            problems.append(f"settings.refine needs PySCF and dftd3: pip install -e '.[dft]' ({exc})")
        except ChairqmError as exc:
            problems.append(f"settings.refine: {exc}")
    if problems:
        raise ChairqmError("\n".join(problems))
    return cfg, plan


@dataclass
class CheckResult:
    """What `chairqm check` prints: the perceived molecules (`table`, text) and the settings line."""

    cfg: dict
    plan: object

    @property
    def table(self) -> str:
        from . import relstereo
        rows = [("molecule", "ring atoms", "substituents", "stereo")]
        for m in self.plan.molecules:
            ring = "-".join(f"{e}{i}" for e, i in zip(m.ring_elements, m.ring))
            subs = ", ".join(f"{s.id}@{s.ring_atom} {s.fragment}" for s in m.substituents) or "none"
            name = m.name + (" (reference)" if m.reference else "")
            rel = relstereo.words(m.mol, m.ring, m.substituents) if m.stereo not in ("", "none") else ""
            rows.append((name, ring, subs, f"{rel} ({m.stereo})" if rel else m.stereo))
        return format_rows(rows)

    @property
    def refine_estimate(self) -> str:
        """With settings.refine: per molecule the basis size and the estimated time and memory of one DFT
        single point (chairqm.refine.estimate), and the run's total for the typical number of single points;
        '' without refinement."""
        block = self.cfg["settings"].get("refine")
        if block is None:
            return ""
        from . import refine
        rs = refine.resolve(block)
        rows = [("molecule", "atoms", "basis functions", "s per single point", "integrals in memory")]
        total = 0.0
        notes = set()
        skipped = []
        for m in self.plan.molecules:
            if not self.plan.refines(m.name):     # refine: auto decided against it
                skipped.append(m.name)
                continue
            e = refine.estimate(rs, [a.GetSymbol() for a in m.mol.GetAtoms()])
            total += e["seconds"]
            mem = f"{e['memory_mb']:.0f} MB" + (" (out of core)" if e["out_of_core"] else "")
            if e["out_of_core"]:
                notes.add("out of core: the integrals exceed max_memory_mb and go to scratch files in "
                          "<molecule>/work/refine/scratch, which is slower")
            rows.append((m.name, str(m.mol.GetNumAtoms()), str(e["n_basis"]), f"{e['seconds']:.0f}", mem))
        k = refine.TYPICAL_SINGLE_POINTS
        text = (f"DFT refinement {rs['functional']}/{rs['basis']} (estimates; one thread per single point):\n"
                + format_rows(rows)
                + f"\nabout {k} single points per molecule (2-6 with the default window): about "
                f"{k * total / 3600:.1f} CPU hours in all; each worker may use up to {refine.worker_memory_cap_mb(rs)} "
                f"MB (max_memory_mb {rs['max_memory_mb']} + {refine.WORKER_OVERHEAD_MB}), beyond which its single "
                "point fails on its own")
        if skipped:
            notes.add(f"refine: auto leaves out {len(skipped)} molecule(s): {', '.join(skipped)}")
        return text + "".join(f"\n{n}" for n in sorted(notes))

    @property
    def settings_line(self) -> str:
        s = self.cfg["settings"]
        return (f"{len(self.plan.molecules)} molecule(s); {s['method']} with {s['engine']}; solvent: "
                f"{solvent_text(s.get('solvent'))}; T = {', '.join(f'{t:g}' for t in s['temperatures_k'])} K")


def check(config) -> CheckResult:
    """Validate a configuration (path or mapping) and perceive its molecules; compute nothing."""
    cfg, plan = prepare(config)
    return CheckResult(cfg, plan)


def solvent_text(solvent) -> str:
    solvent = solvent or {}
    return (solvent.get("model", "") + " " + solvent.get("name", "")).strip() or "none (gas phase)"


def format_rows(rows: list[tuple]) -> str:
    """Left-aligned text table; the first row is the header, underlined."""
    rows = [tuple(str(c) for c in r) for r in rows]
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip() for r in rows]
    lines.insert(1, "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def screen(config_path: Path) -> tuple[list[dict], list[dict]]:
    """Split a configuration's molecules into those that can run and those refused: (valid entries,
    [{"name", "reason"}] refused). A molecule is refused for a problem of its own entry (schema, a name
    used before, its structure, size limits); a problem of the configuration as a whole (YAML, settings)
    raises ChairqmError as `check` does."""
    from . import config as cq_config
    from .plan import perceive_entry
    raw = cq_config.read(config_path)
    if not isinstance(raw, dict) or not isinstance(raw.get("molecules"), list) or not raw["molecules"]:
        cq_config.validate(raw, base_dir=Path(config_path).parent)     # raises with the usual message
    valid, refused, seen = [], [], set()
    for i, entry in enumerate(raw["molecules"]):
        name = entry.get("name") if isinstance(entry, dict) and isinstance(entry.get("name"), str) else None
        label = name or f"molecules[{i}]"
        try:
            cq_config.validate({"molecules": [entry]})
        except ChairqmError as exc:
            refused.append({"name": label, "reason": "; ".join(
                l.replace("molecules[0]", f"molecules[{i}]") for l in str(exc).splitlines())})
            continue
        if name.casefold() in seen:
            refused.append({"name": label, "reason": f"molecule name '{name}' is used twice (names must be unique, "
                                                     "case-insensitively, because each becomes a folder)"})
            continue
        seen.add(name.casefold())
        valid.append(entry)
    if not valid:
        raise ChairqmError("\n".join(f"{r['name']}: {r['reason']}" for r in refused))
    cfg = cq_config.validate({**raw, "molecules": valid}, base_dir=Path(config_path).parent)
    runnable = []
    for entry in cfg["molecules"]:
        try:
            perceive_entry(entry, Path(cfg["_base_dir"]), cfg["settings"])
        except ChairqmError as exc:
            refused.append({"name": entry["name"], "reason": "; ".join(
                l[len(entry["name"]) + 2:] if l.startswith(entry["name"] + ": ") else l for l in str(exc).splitlines())})
            continue
        runnable.append(entry)
    keep = {id(e) for e in runnable}
    valid = [raw_e for raw_e, e in zip(valid, cfg["molecules"]) if id(e) in keep]
    order = {(e.get("name") if isinstance(e, dict) else None) or f"molecules[{i}]": i
             for i, e in reversed(list(enumerate(raw["molecules"])))}
    refused.sort(key=lambda r: order.get(r["name"], len(order)))       # the configuration's order
    if not valid:
        raise ChairqmError("\n".join(f"{r['name']}: {r['reason']}" for r in refused))
    return valid, refused
