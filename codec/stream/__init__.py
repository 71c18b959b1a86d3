"""Frames in a byte stream: frame search, SLIP/COBS stuffing, store-and-forward packs, and the
live encoder and decoder.

Internal to :mod:`codec`; other packages use the names :mod:`codec` exports.
"""
