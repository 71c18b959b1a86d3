"""Bits to frames: the frame envelope (sync, length, CRC) and one module per frame layout,
registered by version number.

Internal to :mod:`codec`; other packages use the names :mod:`codec` exports.
"""
