"""How results are shown: text tables, JSON shapes, matplotlib figures and the HTML report.

Reads result objects of :mod:`compare.study`; never runs a study itself and never imports
:mod:`compare.cli`.
"""
