"""Integers to bits: one bit writer/reader, the adaptive Rice/Exp-Golomb codes, and the range
coder with its fitted tables.

Internal to :mod:`codec`; other packages use the names :mod:`codec` exports.
"""
