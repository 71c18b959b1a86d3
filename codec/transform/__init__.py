"""Samples to coefficients: framing into windows, and the orthonormal bases (closed-form, wavelet,
trained KLT) that both ends build the same way.

Internal to :mod:`codec`; other packages use the names :mod:`codec` exports.
"""
