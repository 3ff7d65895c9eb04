"""Studies that set the fluid model against the simulation or the formulas.

The comparison and its gap tables and flags, the per-interval (transient) table, the
single-station self-check, the scale study, the simulation-verified staffing search and the
simulated overlay of a phase diagram. Imports :mod:`compare.formulas`, :mod:`fluid` and
:mod:`desim`; never :mod:`compare.present` or :mod:`compare.cli`.
"""
