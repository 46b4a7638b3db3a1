"""Result objects of the Python API (chairqm.api): a run's summary and molecules, A-value results and
tables, read from the output folder's files when asked for."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from .errors import ChairqmError

#: Columns of the output tables that hold text: read as strings with "" for an empty cell (numbers stay
#: floats with NaN for an empty cell). `axial` lists the axial substituents ("" = none axial).
TEXT_COLUMNS = {"molecule", "status", "reason", "preferred_family", "additive_source", "flag_reason",
                "calibrated_quantity", "ring_form", "orientation", "axial", "conformer", "seed", "substituent",
                "fragment", "template", "group", "tabulated_source", "other_rings", "thermal_correction_from"}


def _read_csv(path: Path):
    import pandas as pd
    header = pd.read_csv(path, nrows=0).columns
    df = pd.read_csv(path, dtype={c: str for c in header if c in TEXT_COLUMNS})
    for c in df.columns:
        if c in TEXT_COLUMNS:
            df[c] = df[c].fillna("")
    return df


@dataclass
class MoleculeResult:
    """One molecule of a finished run: its folder and its tables."""

    name: str
    folder: Path

    @property
    def families(self):
        """families.csv: free energy and population of each ring form + orientation, per temperature."""
        return _read_csv(self.folder / "families.csv")

    @property
    def conformers(self):
        """conformers.csv: every conformer (failed ones with their status and reason), per temperature."""
        return _read_csv(self.folder / "conformers.csv")

    @property
    def substituents(self):
        return _read_csv(self.folder / "substituents.csv")


@dataclass
class RunResult:
    """A run's output folder read back: `summary` (summary.csv), `failed` molecules, `molecule(name)`."""

    out: Path
    until: str | None = None
    returncode: int = 0
    molecules: list[str] = field(default_factory=list)

    @property
    def summary(self):
        """summary.csv as a DataFrame (one row per molecule and temperature); an error if the run stopped
        before the report stage (`until`)."""
        path = self.out / "summary.csv"
        if not path.is_file():
            raise ChairqmError(f"{self.out} has no summary.csv: the run stopped after stage '{self.until}'"
                               if self.until else f"{self.out} has no summary.csv: the run did not finish")
        return _read_csv(path)

    @property
    def failed(self) -> list[str]:
        """Names of the molecules that failed (status other than ok in summary.csv)."""
        if not (self.out / "summary.csv").is_file():
            return []
        s = self.summary
        return sorted(set(s.loc[s["status"] != "ok", "molecule"]))

    @property
    def report_problems(self) -> list[str]:
        """What the report stage could not build (its database or page; a plain one stands in), from
        provenance.json; empty when everything was built."""
        import json
        try:
            return list(json.loads((self.out / "provenance.json").read_text()).get("report_problems") or [])
        except (OSError, ValueError):
            return []

    @property
    def report(self) -> Path | None:
        p = self.out / "report.html"
        return p if p.is_file() else None

    def molecule(self, name: str) -> MoleculeResult:
        folder = self.out / name
        if self.molecules and name not in self.molecules or not folder.is_dir():
            raise ChairqmError(f"no molecule {name!r} in {self.out}: the molecules are "
                               f"{', '.join(self.molecules) or 'none'}")
        return MoleculeResult(name, folder)


@dataclass
class AValueResult:
    """The A-value of one group, computed on its monosubstituted cyclohexane.

    a_value_kcal: G(axial chair) − G(equatorial chair) in kcal/mol at the first requested temperature
    (NaN when the molecule failed; `reason` says why); `a_values_kcal` at every temperature; `families`
    (families.csv of the molecule, every temperature); `out` the run folder; `tabulated_kcal` and
    `tabulated_source` where the package table has the group."""

    group: str
    molecule: str
    out: Path
    temperatures_k: list[float]
    a_values_kcal: dict[float, float]
    rows: object                         # the group's rows of the A-value table (DataFrame)
    tabulated_kcal: float | None = None
    tabulated_source: str = ""
    reason: str = ""

    @property
    def a_value_kcal(self) -> float:
        return self.a_values_kcal.get(self.temperatures_k[0], math.nan)

    @property
    def families(self):
        path = self.out / self.molecule / "families.csv"
        if not path.is_file():
            raise ChairqmError(f"{self.group}: no families.csv ({self.reason or 'the molecule did not finish'})")
        return _read_csv(path)

    @property
    def conformers(self):
        return _read_csv(self.out / self.molecule / "conformers.csv")


@dataclass
class AValueTable:
    """Several groups computed in one run: `table` (one row per group and temperature, also written as
    OUT/avalues.csv), `results` in the order asked, `result(group)`."""

    out: Path
    table: object
    results: list[AValueResult]
    run: RunResult

    def result(self, group: str) -> AValueResult:
        from . import avalues
        key = avalues.canonical_fragment(group)
        for r in self.results:
            if r.group == key:
                return r
        raise ChairqmError(f"{group} was not computed in this run: the groups are "
                           f"{', '.join(r.group for r in self.results)}")


# ------------------------------------------------------------------------------------ checking
