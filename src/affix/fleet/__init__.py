"""Fleets: one firmware, many units, each with its own calibration record.

``fit.py`` fits every unit of a fleet log from one pass (per-unit
statistics, :mod:`affix.statistics.units`); ``plan.py`` chooses the one
firmware interface that serves every unit and plans each unit within it;
``table.py`` writes ``fleet.csv``.  The record each unit gets is
:mod:`affix.record`.
"""
