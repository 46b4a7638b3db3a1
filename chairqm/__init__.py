"""chairqm: which six-membered-ring conformer dominates, from GFN2-xTB free energies."""

__version__ = "0.1.0"
