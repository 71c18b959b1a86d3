"""Coefficients to integers: the quantizer step rule, term selection against the fidelity budget,
and the trellis (dependent) quantizer.

Internal to :mod:`codec`; other packages use the names :mod:`codec` exports.
"""
