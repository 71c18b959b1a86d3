"""Frames in a byte stream: frame search, SLIP/COBS stuffing, store-and-forward packs, the
live encoder and decoder, chunked decoding with its report, and the frame listing.

Internal to :mod:`codec`; other packages use the names :mod:`codec` exports.
"""
