"""Lane-parallel range coder for coefficient payloads (frame layout version 3).

A *range coder* (G. N. N. Martin 1979), the byte-oriented form of arithmetic
coding (Witten, Neal & Cleary 1987), narrows an integer interval ``[low, low +
range)`` by each symbol's share of a cumulative-frequency table and ships the
top byte of ``low`` whenever ``range`` falls below 2**24.  Here every frame is
an independent *lane*: step k codes operation k of every lane at once with
NumPy integer state arrays, so the cost is in the number of steps, not of
frames.

Operations are ``(cum, freq, shift)``: with ``r = range >> shift`` the
interval becomes ``low += r * cum``, ``range = r * freq``.  A model symbol uses
``shift = TOTAL_BITS`` and a row of a cumulative table; ``w`` equiprobable
("bypass") bits of a value ``v`` are ``(v, 1, w)``, w <= 16.

State: ``low`` < 2**32 after each step, 2**24 <= ``range`` < 2**32 between
steps.  A carry out of ``low`` is added to the lane's bytes already written.
At the end one byte of ``low`` rounded up to a multiple of 2**24 is written,
and trailing zero bytes are dropped: the decoder reads zeros past a lane's end.

Coefficient model (all integer, the same on every machine): magnitude
``|q_j|`` of coefficient j >= 1 gets a context class from the sum S of the
previous min(j, 4) magnitudes of the same subframe and from the octave of
j / N (:func:`context_class`); the class fixes a shift ``s`` and a
zero-modified geometric law (:func:`geometric_cum`).  The
high part ``|q| >> s`` is a model symbol 0 .. M-1, or the escape M followed by
the bit length of ``hi - M`` (uniform table) and its bits below the leading
one; then ``s`` low bits and, for a non-zero, a sign bit are bypass bits.
Coefficient 0 sends the bit length of ``|q|`` (uniform table), the bits below
its leading one and a sign bit.

References
----------
G. N. N. Martin, "Range encoding: an algorithm for removing redundancy from a
digitised message", Video & Data Recording Conference, Southampton, 1979.
I. H. Witten, R. M. Neal and J. G. Cleary, "Arithmetic coding for data
compression", Commun. ACM 30(6), 1987.
"""

from __future__ import annotations

import functools
import math

import numpy as np

from ..quantize.trellis import TRANSITIONS, quantizer_ids
from .bits import bit_length as _bit_length
from .rice import preceding_sums

__all__ = [
    "TOTAL_BITS",
    "MODEL_SYMBOLS",
    "CONTEXT_WINDOW",
    "geometric_cum",
    "context_class",
    "band_class",
    "CUM",
    "TRELLIS_BASE",
    "SHIFT",
    "LEN_ROW",
    "MEAN_LEN_ROW",
    "encode_lanes",
    "RangeDecoder",
    "coefficient_ops",
    "coefficient_cost_bits",
    "decode_coefficients",
]

TOTAL_BITS = 15
TOTAL = 1 << TOTAL_BITS
#: Model symbols 0 .. M-1 of the high part; symbol M is the escape.
MODEL_SYMBOLS = 64
#: Coefficients whose magnitudes form the context of the next one.
CONTEXT_WINDOW = 4
_TOP = 1 << 24
_MASK32 = (1 << 32) - 1
_BYPASS_MAX = 16


def geometric_cum(a: int, z: int = 0, m: int = MODEL_SYMBOLS, total: int = TOTAL) -> list[int]:
    """Cumulative frequencies of a zero-modified geometric law on 0..m-1, plus escape m.

    P(0) is about ``z / 2**16`` (with ``z = 0``: a plain geometric law) and the
    magnitudes from 1 on fall with ratio ``theta = a / 2**16``.  With ``R = total
    - m - 1``, ``R0 = (R z) >> 16`` (or ``R (1 - theta)`` rounded down when z = 0)
    and ``R1 = R - R0``: ``cum[0] = 0``, ``cum[i] = R0 + floor(R1 (1 - theta**(i-1)))
    + i`` for i = 1..m and ``cum[m + 1] = total``, so every symbol has frequency
    >= 1.  Exact Python integers (``theta**i = a**i / 2**(16 i)``): both ends
    build the same table on any machine.
    """
    r = total - m - 1
    r0 = (r * z) >> 16 if z else (r * ((1 << 16) - a)) >> 16
    r1 = r - r0
    cum = [0] + [r0 + ((r1 * ((1 << (16 * (i - 1))) - a ** (i - 1))) >> (16 * (i - 1))) + i
                 for i in range(1, m + 1)]
    return cum + [total]


def _uniform_cum(m: int = MODEL_SYMBOLS, total: int = TOTAL) -> list[int]:
    """Equal frequencies on 0..m-1 (bit lengths 0..63); row width m + 2 (last entry repeated)."""
    return [(total * i) // m for i in range(m + 1)] + [total]


# Context classes: a scale class from the recent magnitudes (0 for S = 0, then
# 1 + half-octaves of u = 16 S / count, 16 x their mean) times a band class
# from the coefficient's relative position j / N (octaves of 256 j / N), since
# a spectrum falls with frequency at a given local scale.
_SCALES = 121
_BANDS = 8
_CLASSES = _SCALES * _BANDS
#: Layout 4 (dependent quantization) classes: ``TRELLIS_BASE * (1 + quantizer) + class``.
TRELLIS_BASE = _CLASSES

#: (shift s, z, a) measured per (scale, band) cell on the quantized DCT
#: coefficients of Gaussian AR(1) sources (rho 0.9, 0.95, 0.99; F 0.9 to 0.999;
#: N = 64 and 256; seeds 99-101, not the benchmark's) by tools/fit_range_model.py:
#: the high part |q| >> s has P(0) = z / 2**16 and, from 1 on, a geometric tail
#: of ratio a / 2**16.  Cells with too few samples use their scale's row of
#: _SCALE_PARAMS (all bands together); beyond that, each scale pair doubles.
_CELL_PARAMS: dict[tuple[int, int], tuple[int, int, int]] = {
    (0, 0): (0, 3104, 57191),
    (0, 2): (0, 5229, 54900),
    (0, 3): (0, 37725, 29789),
    (0, 4): (0, 43723, 7350),
    (0, 5): (0, 47902, 5439),
    (0, 6): (0, 52950, 4244),
    (0, 7): (0, 54084, 4440),
    (1, 3): (0, 36547, 19737),
    (1, 4): (0, 38919, 11764),
    (1, 5): (0, 41929, 9498),
    (1, 6): (0, 45678, 9241),
    (1, 7): (0, 45213, 9352),
    (3, 2): (0, 29612, 23336),
    (3, 3): (0, 28939, 33988),
    (3, 4): (0, 33036, 16676),
    (3, 5): (0, 36546, 14477),
    (3, 6): (0, 38266, 14582),
    (3, 7): (0, 37603, 15190),
    (4, 2): (0, 27129, 29032),
    (4, 3): (0, 27662, 25657),
    (4, 4): (0, 29044, 21370),
    (4, 5): (0, 31386, 19762),
    (4, 6): (0, 31500, 20193),
    (4, 7): (0, 30911, 21752),
    (5, 0): (0, 4846, 55573),
    (5, 1): (0, 9600, 47579),
    (5, 2): (0, 11104, 51740),
    (5, 3): (0, 19000, 35344),
    (5, 4): (0, 24035, 27097),
    (5, 5): (0, 25062, 27102),
    (5, 6): (0, 24356, 28050),
    (5, 7): (0, 23199, 29412),
    (6, 1): (0, 9491, 47273),
    (6, 2): (0, 16556, 38950),
    (6, 3): (0, 15815, 37568),
    (6, 4): (0, 19931, 32241),
    (6, 5): (0, 18764, 34482),
    (6, 6): (0, 17886, 36081),
    (6, 7): (0, 17456, 35164),
    (7, 0): (0, 5599, 55806),
    (7, 1): (0, 11668, 45659),
    (7, 2): (0, 10326, 47611),
    (7, 3): (0, 14432, 40126),
    (7, 4): (0, 16050, 38827),
    (7, 5): (0, 13849, 41382),
    (7, 6): (0, 13109, 42616),
    (7, 7): (0, 14718, 39002),
    (8, 0): (0, 6962, 55887),
    (8, 1): (0, 10726, 48184),
    (8, 2): (0, 10496, 48571),
    (8, 3): (0, 11888, 45237),
    (8, 4): (0, 11751, 44943),
    (8, 5): (0, 10037, 47549),
    (8, 6): (0, 10043, 46730),
    (8, 7): (0, 12740, 42521),
    (9, 0): (0, 7977, 56644),
    (9, 1): (0, 8178, 52109),
    (9, 2): (0, 8958, 52425),
    (9, 3): (0, 9433, 50794),
    (9, 4): (0, 8417, 51187),
    (9, 5): (0, 7266, 52087),
    (9, 6): (0, 8407, 49602),
    (9, 7): (0, 11097, 45637),
    (10, 0): (1, 16163, 52416),
    (10, 1): (0, 5881, 56221),
    (10, 2): (0, 6645, 56801),
    (10, 3): (0, 5662, 56586),
    (10, 4): (0, 6215, 54336),
    (10, 5): (0, 5414, 54739),
    (10, 6): (0, 7083, 51951),
    (10, 7): (0, 10289, 49400),
    (11, 0): (1, 12168, 56745),
    (11, 1): (1, 8116, 56050),
    (11, 2): (1, 9622, 54184),
    (11, 3): (0, 4754, 56931),
    (11, 4): (0, 5031, 56739),
    (11, 5): (0, 4653, 56506),
    (11, 6): (0, 6133, 54072),
    (12, 0): (2, 13388, 54789),
    (12, 1): (1, 5819, 56486),
    (12, 2): (1, 7316, 54766),
    (12, 3): (1, 9832, 53722),
    (12, 4): (1, 6706, 54173),
    (12, 5): (1, 8520, 50472),
    (12, 6): (0, 5362, 55933),
    (13, 0): (2, 8358, 55021),
    (13, 1): (1, 5624, 57616),
    (13, 2): (1, 7491, 57114),
    (13, 3): (2, 9206, 53334),
    (13, 4): (1, 5865, 55655),
    (13, 5): (1, 7224, 51839),
    (14, 0): (2, 8864, 54719),
    (14, 1): (2, 7644, 57890),
    (14, 2): (2, 6225, 56949),
    (14, 3): (2, 8517, 52902),
    (14, 4): (1, 6051, 54951),
    (14, 5): (1, 5578, 52744),
    (15, 0): (2, 8881, 57897),
    (15, 1): (3, 9374, 51953),
    (15, 2): (2, 5145, 56590),
    (15, 3): (1, 4625, 57524),
    (15, 4): (1, 6601, 53099),
    (16, 0): (3, 7745, 55355),
    (16, 1): (3, 8529, 51360),
    (16, 2): (2, 5047, 55132),
    (16, 3): (1, 5482, 55414),
    (17, 0): (3, 7442, 55115),
    (17, 1): (2, 4528, 57417),
    (17, 2): (1, 4142, 57286),
    (18, 0): (3, 7022, 54419),
}
_SCALE_PARAMS: tuple[tuple[int, int, int], ...] = (
    (0, 52999, 10505),
    (0, 44798, 9505),
    (0, 44798, 9505),
    (0, 37396, 15390),
    (0, 31026, 21034),
    (0, 23640, 29818),
    (0, 17952, 35245),
    (0, 14127, 41012),
    (0, 11064, 45981),
    (0, 8491, 50805),
    (0, 6136, 54699),
    (0, 4816, 57104),
    (1, 7981, 53711),
    (1, 5925, 57002),
    (2, 10470, 51882),
    (2, 8904, 53456),
    (2, 6278, 55459),
    (2, 7422, 54938),
    (3, 8998, 53175),
)


#: Layout 4: (s, z, a) per (quantizer, scale, band) cell and per (quantizer, scale),
#: measured like the ones above on the levels of dependent quantization.
_TRELLIS_CELL_PARAMS: dict[tuple[int, int, int], tuple[int, int, int]] = {
    (0, 0, 0): (0, 4025, 52508),
    (0, 0, 2): (0, 5137, 51061),
    (0, 0, 3): (0, 37244, 38924),
    (0, 0, 4): (0, 55981, 5520),
    (0, 0, 5): (0, 58317, 2157),
    (0, 0, 6): (0, 62199, 2649),
    (0, 0, 7): (0, 62957, 2758),
    (0, 1, 3): (0, 45074, 14579),
    (0, 1, 4): (0, 46164, 5044),
    (0, 1, 5): (0, 51060, 4990),
    (0, 1, 6): (0, 55966, 5470),
    (0, 1, 7): (0, 55742, 5343),
    (0, 3, 3): (0, 33972, 26349),
    (0, 3, 4): (0, 41955, 8607),
    (0, 3, 5): (0, 47304, 7439),
    (0, 3, 6): (0, 50400, 7759),
    (0, 3, 7): (0, 48470, 7342),
    (0, 4, 2): (0, 31658, 23712),
    (0, 4, 3): (0, 32523, 16979),
    (0, 4, 4): (0, 35269, 11598),
    (0, 4, 5): (0, 39399, 10185),
    (0, 4, 6): (0, 39000, 11140),
    (0, 4, 7): (0, 37454, 11296),
    (0, 5, 1): (0, 9477, 39142),
    (0, 5, 2): (0, 20867, 29100),
    (0, 5, 3): (0, 18464, 26132),
    (0, 5, 4): (0, 25941, 18110),
    (0, 5, 5): (0, 25746, 19166),
    (0, 5, 6): (0, 23360, 20006),
    (0, 5, 7): (0, 22135, 21160),
    (0, 6, 1): (0, 13797, 39800),
    (0, 6, 2): (0, 14482, 30482),
    (0, 6, 3): (0, 17989, 30121),
    (0, 6, 4): (0, 19489, 24818),
    (0, 6, 5): (0, 15872, 28613),
    (0, 6, 6): (0, 14510, 30667),
    (0, 6, 7): (0, 13565, 29278),
    (0, 7, 0): (0, 6621, 51558),
    (0, 7, 1): (0, 11748, 39242),
    (0, 7, 2): (0, 9434, 43314),
    (0, 7, 3): (0, 13376, 34418),
    (0, 7, 4): (0, 13427, 34397),
    (0, 7, 5): (0, 10453, 38301),
    (0, 7, 6): (0, 9302, 39096),
    (0, 7, 7): (0, 10377, 34446),
    (0, 8, 1): (0, 8381, 44597),
    (0, 8, 2): (0, 8308, 42445),
    (0, 8, 3): (0, 10224, 42489),
    (0, 8, 4): (0, 8316, 44784),
    (0, 8, 5): (0, 6822, 46166),
    (0, 8, 6): (0, 6846, 44098),
    (0, 8, 7): (0, 8406, 38972),
    (0, 9, 0): (0, 7738, 54116),
    (0, 9, 1): (0, 6341, 51742),
    (0, 9, 2): (0, 7551, 51896),
    (0, 9, 3): (0, 5935, 52862),
    (0, 9, 4): (0, 5942, 49905),
    (0, 9, 5): (0, 4783, 50816),
    (0, 9, 6): (0, 5514, 47390),
    (0, 9, 7): (0, 6667, 42724),
    (0, 10, 0): (0, 5975, 57768),
    (0, 10, 1): (1, 7775, 53376),
    (0, 10, 2): (0, 3717, 57770),
    (0, 10, 3): (0, 4117, 53623),
    (0, 10, 4): (0, 4481, 52746),
    (0, 10, 5): (0, 3569, 53630),
    (0, 10, 6): (0, 4241, 50369),
    (0, 10, 7): (0, 5980, 48210),
    (0, 11, 0): (1, 8572, 57761),
    (0, 11, 1): (1, 8282, 52421),
    (0, 11, 2): (1, 9372, 50836),
    (0, 11, 3): (0, 3866, 55953),
    (0, 11, 4): (0, 2630, 57617),
    (0, 11, 5): (0, 3004, 55412),
    (0, 11, 6): (0, 3174, 52768),
    (0, 12, 0): (2, 8639, 51011),
    (0, 12, 1): (1, 7745, 53169),
    (0, 12, 2): (1, 10256, 53064),
    (0, 12, 3): (1, 5223, 57548),
    (0, 12, 4): (1, 6937, 53073),
    (0, 12, 5): (0, 2172, 56889),
    (0, 13, 0): (1, 5785, 57430),
    (0, 13, 1): (2, 9220, 55947),
    (0, 13, 2): (2, 11050, 54846),
    (0, 13, 3): (2, 10168, 51229),
    (0, 13, 4): (1, 6287, 53649),
    (0, 13, 5): (0, 2020, 57387),
    (0, 14, 1): (3, 9572, 50203),
    (0, 14, 2): (2, 5938, 55123),
    (0, 14, 3): (1, 4744, 56550),
    (0, 14, 4): (1, 6511, 51932),
    (0, 15, 1): (2, 5021, 56318),
    (0, 15, 2): (2, 6361, 53809),
    (0, 15, 3): (1, 5439, 55084),
    (0, 16, 1): (2, 5437, 55079),
    (0, 16, 2): (1, 4331, 56361),
    (0, 17, 0): (3, 9035, 51095),
    (1, 0, 3): (0, 33457, 2699),
    (1, 0, 4): (0, 38894, 1092),
    (1, 0, 5): (0, 41880, 936),
    (1, 0, 6): (0, 47878, 518),
    (1, 0, 7): (0, 50993, 386),
    (1, 1, 3): (0, 30231, 9269),
    (1, 1, 4): (0, 30623, 3895),
    (1, 1, 5): (0, 33045, 2648),
    (1, 1, 6): (0, 38018, 2127),
    (1, 1, 7): (0, 38854, 2371),
    (1, 3, 2): (0, 23202, 11443),
    (1, 3, 3): (0, 22254, 24204),
    (1, 3, 4): (0, 23926, 8013),
    (1, 3, 5): (0, 26050, 5948),
    (1, 3, 6): (0, 28497, 5962),
    (1, 3, 7): (0, 26819, 6416),
    (1, 4, 2): (0, 19588, 20359),
    (1, 4, 3): (0, 19203, 17363),
    (1, 4, 4): (0, 19506, 13445),
    (1, 4, 5): (0, 21047, 11379),
    (1, 4, 6): (0, 21207, 12732),
    (1, 4, 7): (0, 19914, 13315),
    (1, 5, 0): (0, 3574, 52730),
    (1, 5, 1): (0, 8820, 41236),
    (1, 5, 2): (0, 6309, 48438),
    (1, 5, 3): (0, 12868, 28423),
    (1, 5, 4): (0, 15240, 20638),
    (1, 5, 5): (0, 14981, 21749),
    (1, 5, 6): (0, 13612, 23283),
    (1, 5, 7): (0, 12961, 24409),
    (1, 6, 1): (0, 6989, 39822),
    (1, 6, 2): (0, 10170, 33423),
    (1, 6, 3): (0, 9418, 31813),
    (1, 6, 4): (0, 12130, 28087),
    (1, 6, 5): (0, 9844, 32336),
    (1, 6, 6): (0, 9181, 33933),
    (1, 6, 7): (0, 8446, 33027),
    (1, 7, 1): (0, 7657, 41171),
    (1, 7, 2): (0, 7569, 38600),
    (1, 7, 3): (0, 9467, 36457),
    (1, 7, 4): (0, 8727, 36905),
    (1, 7, 5): (0, 6797, 40514),
    (1, 7, 6): (0, 6194, 41222),
    (1, 7, 7): (0, 6841, 37331),
    (1, 8, 0): (0, 5077, 52445),
    (1, 8, 1): (0, 6135, 45879),
    (1, 8, 2): (0, 6007, 46130),
    (1, 8, 3): (0, 6909, 43887),
    (1, 8, 4): (0, 5757, 45733),
    (1, 8, 5): (0, 4505, 47130),
    (1, 8, 6): (0, 4569, 45669),
    (1, 8, 7): (0, 5624, 41284),
    (1, 9, 0): (0, 4986, 57205),
    (1, 9, 1): (0, 4673, 53051),
    (1, 9, 2): (0, 4254, 53753),
    (1, 9, 3): (0, 4390, 53062),
    (1, 9, 4): (0, 3942, 50524),
    (1, 9, 5): (0, 3170, 51598),
    (1, 9, 6): (0, 3613, 48529),
    (1, 9, 7): (0, 4559, 44540),
    (1, 10, 0): (1, 11069, 55126),
    (1, 10, 1): (1, 5973, 53089),
    (1, 10, 2): (1, 7439, 51508),
    (1, 10, 3): (0, 3171, 54323),
    (1, 10, 4): (0, 2993, 53242),
    (1, 10, 5): (0, 2507, 54164),
    (1, 10, 6): (0, 3368, 51461),
    (1, 10, 7): (0, 4745, 47936),
    (1, 11, 0): (2, 11129, 51840),
    (1, 11, 1): (1, 5492, 52220),
    (1, 11, 2): (1, 7837, 50589),
    (1, 11, 3): (0, 2653, 56349),
    (1, 11, 4): (1, 6820, 50480),
    (1, 11, 5): (0, 1985, 55882),
    (1, 11, 6): (0, 2479, 53164),
    (1, 12, 0): (2, 12118, 51486),
    (1, 12, 1): (1, 6673, 53512),
    (1, 12, 2): (1, 8404, 53203),
    (1, 12, 3): (1, 4216, 57581),
    (1, 12, 4): (1, 5350, 53258),
    (1, 12, 5): (0, 1837, 57305),
    (1, 13, 0): (2, 12456, 52171),
    (1, 13, 1): (2, 9961, 56710),
    (1, 13, 2): (2, 7240, 55036),
    (1, 13, 3): (2, 9202, 51326),
    (1, 13, 4): (1, 4960, 53945),
    (1, 13, 5): (1, 6270, 50569),
    (1, 14, 1): (3, 8732, 49705),
    (1, 14, 2): (2, 5260, 55203),
    (1, 14, 3): (1, 3839, 56778),
    (1, 14, 4): (1, 5142, 51752),
    (1, 15, 1): (2, 4547, 56965),
    (1, 15, 2): (2, 5332, 53930),
    (1, 15, 3): (1, 3740, 55222),
    (1, 16, 1): (2, 5219, 55435),
    (1, 16, 2): (1, 3152, 55975),
    (1, 17, 0): (3, 6433, 51214),
}
_TRELLIS_SCALE_PARAMS: tuple[tuple[tuple[int, int, int], ...], ...] = (
    (
        (0, 61413, 31358),
        (0, 55040, 5449),
        (0, 55040, 5449),
        (0, 48524, 8133),
        (0, 38028, 11222),
        (0, 23216, 20677),
        (0, 14984, 29287),
        (0, 10573, 37222),
        (0, 7691, 43606),
        (0, 5640, 49729),
        (0, 4041, 53612),
        (0, 3062, 56713),
        (1, 7502, 53702),
        (1, 5602, 56621),
        (1, 4647, 57472),
        (2, 8824, 52392),
        (2, 8784, 51927),
        (2, 6374, 56384),
    ),
    (
        (0, 49654, 479),
        (0, 37825, 2417),
        (0, 37825, 2417),
        (0, 27065, 6585),
        (0, 20435, 12926),
        (0, 13460, 25426),
        (0, 9298, 32702),
        (0, 7084, 38958),
        (0, 5225, 45296),
        (0, 3731, 50614),
        (0, 2843, 54187),
        (0, 2050, 57007),
        (1, 5963, 53890),
        (1, 4330, 56804),
        (2, 10085, 50278),
        (2, 7491, 52638),
        (2, 8089, 51836),
        (2, 4931, 57113),
    ),
)


def _class_params(scale: int, band: int) -> tuple[int, int, int]:
    """(s, z, a) of a (scale, band) cell."""
    if (scale, band) in _CELL_PARAMS:
        return _CELL_PARAMS[(scale, band)]
    if scale < len(_SCALE_PARAMS):
        return _SCALE_PARAMS[scale]
    base = len(_SCALE_PARAMS) - 2
    s, z, a = _SCALE_PARAMS[base + (scale - base) % 2]
    return s + (scale - base) // 2, z, a


def _trellis_params(qid: int, scale: int, band: int) -> tuple[int, int, int]:
    """(s, z, a) of a (quantizer, scale, band) cell of layout 4."""
    if (qid, scale, band) in _TRELLIS_CELL_PARAMS:
        return _TRELLIS_CELL_PARAMS[(qid, scale, band)]
    own = _TRELLIS_SCALE_PARAMS[qid]
    if scale < len(own):
        return own[scale]
    base = len(own) - 2
    s, z, a = own[base + (scale - base) % 2]
    return s + (scale - base) // 2, z, a


def _build_tables():
    rows, shifts, cache = [], [], {}
    cells = [_class_params(c // _BANDS, c % _BANDS) for c in range(_CLASSES)]
    cells += [_trellis_params(t, c // _BANDS, c % _BANDS) for t in (0, 1)
              for c in range(_CLASSES)]
    for s, z, a in cells:
        if (z, a) not in cache:
            cache[(z, a)] = geometric_cum(a, z)
        rows.append(cache[(z, a)])
        shifts.append(s)
    rows.append(_uniform_cum())
    shifts.append(0)
    rows.append(_mean_len_cum())
    shifts.append(0)
    return np.array(rows, dtype=np.int64), np.array(shifts, dtype=np.int64)


def _mean_len_cum() -> list[int]:
    """Bit lengths of coefficient 0 when the subframe sends its mean (reference ac).

    The mean then lives in the mean field, and for a basis whose first vector
    is constant (dct, legendre, haar, walsh) coefficient 0 holds only the
    mean's rounding error, below half a step: its code is 0.  A zero-modified
    geometric law with P(0) = 7/8 and ratio 3/4 (round values chosen from that
    argument, not fitted) codes that 0 in 0.19 bits instead of the uniform
    table's 6; a wavelet's coefficient 0 of bit length 1 to 6 costs 5.0 to 6.7.
    Bit lengths 0 .. 63 (the last as the law's escape), width 66 like the
    uniform row.
    """
    return geometric_cum(3 << 14, 7 << 13, m=MODEL_SYMBOLS - 1) + [TOTAL]


#: Cumulative tables, one row per class (then the uniform bit-length table and
#: the bit-length table of coefficient 0 beside a mean).
CUM, SHIFT = _build_tables()
LEN_ROW = CUM.shape[0] - 2
MEAN_LEN_ROW = CUM.shape[0] - 1
_W = CUM.shape[1]
_FLAT = CUM.ravel()
# cost in bits of each (class, symbol): -log2(freq / TOTAL)
with np.errstate(divide="ignore"):
    _COST = TOTAL_BITS - np.log2(np.diff(CUM, axis=1).astype(np.float64))


def context_class(total: np.ndarray, count: np.ndarray, j: np.ndarray, n: int) -> np.ndarray:
    """Model class of coefficient j >= 1 of N = ``n`` from the sum of the previous ``count``."""
    total = np.asarray(total, dtype=np.int64)
    return _classes(total, (total << 4) // np.maximum(count, 1), band_class(j, n))


def band_class(j: np.ndarray, n: int) -> np.ndarray:
    """Octave of 256 j / N, 0 .. 7."""
    return np.clip(_bit_length((np.asarray(j, dtype=np.int64) << 8) // n) - 1, 0, _BANDS - 1)


def _classes(total: np.ndarray, u: np.ndarray, band: np.ndarray) -> np.ndarray:
    bl = np.frexp(u.astype(np.float64))[1]  # exact bit length below 2**53
    bl = bl.astype(np.int64)
    h = (u >> np.maximum(bl - 2, 0)) & 1
    scale = np.clip(2 * bl + h - 5, 1, _SCALES - 1)  # 1 + 2 (bl - 3) + h
    return np.where(total == 0, 0, scale) * _BANDS + band


def _contexts(mag: np.ndarray) -> np.ndarray:
    """Class of every coefficient of every row (column 0: -1, coded on its own)."""
    ns, n = mag.shape
    j = np.arange(1, n)
    total = preceding_sums(mag, CONTEXT_WINDOW)
    u = total << 2  # 16 S / 4 once four magnitudes are known
    w = min(CONTEXT_WINDOW, n) - 1
    u[:, :w] = (total[:, :w] << 4) // j[:w]
    cls = np.full((ns, n), -1, dtype=np.int64)
    cls[:, 1:] = _classes(total, u, band_class(j, n))
    return cls


def _trellis_classes(mag: np.ndarray, q: np.ndarray, trellis) -> np.ndarray:
    """Classes of every row; rows flagged in ``trellis`` (bool or per-row) use layout 4's sets."""
    cls = _contexts(mag)
    if trellis is None or not np.any(trellis):
        return cls
    rows = np.flatnonzero(np.broadcast_to(np.asarray(trellis, dtype=bool), (q.shape[0],)))
    # the table set of each level's quantizer: 0 -> TRELLIS_BASE, 1 -> 2 TRELLIS_BASE
    cls[rows, 1:] += TRELLIS_BASE * (1 + quantizer_ids(q[rows])[:, 1:])
    return cls


def coefficient_ops(q: np.ndarray, count: np.ndarray, trellis=None, mean: bool = False):
    """Coding operations of the coded coefficients (j < count) of each row of ``q``.

    Returns ``(cum, freq, shift, row)`` flat in row-major order (rows in order,
    coefficients in order), ``row`` giving each operation's row.  Per
    coefficient: the model symbol; on escape (or for coefficient 0) the bit
    length symbol and the bits below the leading one; the ``s`` low bits; the
    sign of a non-zero.  Rare operations are built only where present.
    ``trellis`` (a bool, or one per row): rows of levels of dependent
    quantization (layout 4), whose classes also name each level's quantizer.
    ``mean``: the subframes send a mean (reference ac), so coefficient 0's
    bit length uses the row ``MEAN_LEN_ROW``.
    """
    ns, n = q.shape
    mag2 = np.abs(q).astype(np.int64)
    cls2 = _trellis_classes(mag2, q, trellis)
    flat = np.flatnonzero((np.arange(n) < count[:, None]).ravel())
    row = flat // n
    first = (flat % n) == 0
    mag = mag2.ravel()[flat]
    cls = cls2.ravel()[flat]
    neg = q.ravel()[flat] < 0
    s = np.where(first, 0, SHIFT[np.maximum(cls, 0)])
    hi = mag >> s
    esc = ~first & (hi >= MODEL_SYMBOLS)
    big = first | esc
    sym = np.where(first, _bit_length(mag), np.minimum(hi, MODEL_SYMBOLS))
    tab = np.where(first, MEAN_LEN_ROW if mean else LEN_ROW, cls) * _W + sym
    bi = np.flatnonzero(big)
    e = np.where(first[bi], mag[bi], hi[bi] - MODEL_SYMBOLS)
    eb = _bit_length(e)
    ew = np.maximum(eb - 1, 0)
    ev = e & ((np.int64(1) << ew) - 1)
    nz = mag > 0
    ce = np.zeros(mag.size, np.int64)
    ce[bi] = (ew + _BYPASS_MAX - 1) // _BYPASS_MAX
    cl = (s + _BYPASS_MAX - 1) // _BYPASS_MAX
    nops = 1 + esc + ce + cl + nz
    base = np.cumsum(nops) - nops
    total = int(nops.sum())
    cum = np.empty(total, np.int64)
    freq = np.ones(total, np.int64)
    shift = np.empty(total, np.int64)
    cum[base] = _FLAT[tab]
    freq[base] = _FLAT[tab + 1] - _FLAT[tab]
    shift[base] = TOTAL_BITS
    at = base + 1
    # escape: bit length of hi - M from the uniform table
    ei = np.flatnonzero(esc)
    if ei.size:
        fe = LEN_ROW * _W + eb[np.searchsorted(bi, ei)]
        cum[at[ei]] = _FLAT[fe]
        freq[at[ei]] = _FLAT[fe + 1] - _FLAT[fe]
        shift[at[ei]] = TOTAL_BITS
        at[ei] += 1
    for idx, v, w in ((bi, ev, ew), (np.flatnonzero(cl), None, None)):
        if not idx.size:
            continue
        if v is None:  # the s low bits
            w = s[idx]
            v = mag[idx] & ((np.int64(1) << w) - 1)
        rem = w.copy()
        while (rem > 0).any():  # chunks of <= 16 bits, most significant first
            cw = np.minimum(rem, _BYPASS_MAX)
            rem = rem - cw
            k = np.flatnonzero(cw > 0)
            pos = at[idx[k]]
            cum[pos] = (v[k] >> rem[k]) & ((np.int64(1) << cw[k]) - 1)
            shift[pos] = cw[k]
            at[idx[k]] += 1
    zi = np.flatnonzero(nz)
    cum[at[zi]] = neg[zi]
    shift[at[zi]] = 1
    return cum, freq, shift, np.repeat(row, nops)


def coefficient_cost_bits(q: np.ndarray, count: np.ndarray | None = None,
                          trellis=None, mean: bool = False) -> np.ndarray:
    """Ideal code length in bits, -sum log2 p, of each row's coded coefficients.

    Used by the encoder's rate choice; the range coder spends this plus at most
    a few bits per lane.  ``count`` defaults to last non-zero + 1; ``mean`` as in
    :func:`coefficient_ops`.
    """
    ns, n = q.shape
    mag = np.abs(q).astype(np.int64)
    if count is None:
        nzr = mag > 0
        count = np.where(nzr.any(axis=1), n - np.argmax(nzr[:, ::-1], axis=1), 0)
    cls = _trellis_classes(mag, q, trellis)
    coded = np.arange(n) < count[:, None]
    s = SHIFT[np.maximum(cls, 0)]
    s[:, 0] = 0
    hi = mag >> s
    esc = hi >= MODEL_SYMBOLS
    esc[:, 0] = False
    sym = np.minimum(hi, MODEL_SYMBOLS)
    bl0 = _bit_length(mag[:, 0])
    sym[:, 0] = bl0
    row_cls = cls.copy()
    row_cls[:, 0] = MEAN_LEN_ROW if mean else LEN_ROW
    bits = _COST[row_cls, sym] + s + (mag > 0)
    eb = _bit_length(np.where(esc, hi - MODEL_SYMBOLS, 0))
    bits += np.where(esc, _COST[LEN_ROW, 0] + np.maximum(eb - 1, 0), 0)
    bits[:, 0] += np.maximum(bl0 - 1, 0)
    return np.where(coded, bits, 0.0).sum(axis=1)


def encode_lanes(cum: np.ndarray, freq: np.ndarray, shift: np.ndarray, lane: np.ndarray,
                 lanes: int) -> tuple[np.ndarray, np.ndarray]:
    """Range-code the operations of every lane; return (bytes of all lanes, bytes per lane).

    ``lane`` gives each operation's lane, non-decreasing; operations of a lane
    are coded in order.  The lanes' bytes come back concatenated in lane order.
    """
    nops = np.bincount(lane, minlength=lanes).astype(np.int64)
    ostart = np.cumsum(nops) - nops
    order = np.argsort(-nops, kind="stable")  # longest lanes first: active lanes are a prefix
    nsorted = nops[order]
    # bytes a lane can emit: each op narrows range by at most shift + 1 bits
    bits = np.bincount(lane, weights=shift + 1, minlength=lanes).astype(np.int64)
    cap = bits // 8 + 3
    bstart = np.cumsum(cap) - cap
    buf = np.zeros(int(cap.sum()) + 1, dtype=np.uint8)
    low = np.zeros(lanes, dtype=np.int64)
    rng = np.full(lanes, _MASK32, dtype=np.int64)
    pos = bstart[order].copy()  # write position (absolute), per sorted lane
    base = bstart[order]
    low = low[order]
    rng = rng[order]
    os_ = ostart[order]
    steps = int(nsorted[0]) if lanes else 0
    active = lanes
    for k in range(steps):
        while active and nsorted[active - 1] <= k:
            active -= 1
        a = slice(0, active)
        idx = os_[a] + k
        r = rng[a] >> shift[idx]
        lw = low[a] + r * cum[idx]
        rng[a] = r * freq[idx]
        carry = lw > _MASK32
        if carry.any():
            lw[carry] -= 1 << 32
            _propagate(buf, pos[a][carry] - 1)
        low[a] = lw
        _renorm_encode(buf, low, rng, pos, active)
    # flush: round low up to a multiple of 2**24 and write its top byte
    v = (low + _TOP - 1) & ~np.int64(_TOP - 1)
    carry = v > _MASK32
    if carry.any():
        v[carry] -= 1 << 32
        _propagate(buf, pos[carry] - 1)
    buf[pos] = (v >> 24).astype(np.uint8)
    pos = pos + 1
    # drop trailing zero bytes of each lane (the decoder reads zeros past the end)
    length = np.zeros(lanes, dtype=np.int64)
    used = pos - base
    length[order] = _trim_zeros(buf, base, used)
    keep = np.repeat(bstart, length) + (np.arange(int(length.sum())) -
                                        np.repeat(np.cumsum(length) - length, length))
    return buf[keep], length


def _trim_zeros(buf: np.ndarray, base: np.ndarray, used: np.ndarray) -> np.ndarray:
    """Length of each lane's bytes ``buf[base : base + used]`` without trailing zeros."""
    total = int(used.sum())
    if total == 0:
        return used
    owner = np.repeat(np.arange(base.size), used)
    off = np.arange(total) - np.repeat(np.cumsum(used) - used, used)
    vals = buf[np.repeat(base, used) + off]
    last = np.full(base.size, -1, dtype=np.int64)
    nzi = np.flatnonzero(vals)
    np.maximum.at(last, owner[nzi], off[nzi])
    return last + 1


def _propagate(buf: np.ndarray, at: np.ndarray) -> None:
    """Add one to the byte at each position, carrying into earlier bytes on overflow."""
    at = at.copy()
    while at.size:
        buf[at] += np.uint8(1)  # positions are distinct (one per lane)
        wrapped = buf[at] == 0
        at = at[wrapped] - 1


def _renorm_encode(buf, low, rng, pos, active) -> None:
    for _ in range(3):
        need = np.flatnonzero(rng[:active] < _TOP)
        if not need.size:
            return
        buf[pos[need]] = (low[need] >> 24).astype(np.uint8)
        pos[need] += 1
        low[need] = (low[need] << 8) & _MASK32
        rng[need] <<= 8


# Symbol of every (table, value t >> _LUT_DROP): most t decode with one lookup.  Many
# classes share a table, so the lookup is built once per distinct table.
_LUT_DROP = 3


@functools.cache
def _lut():
    """The decoder's lookup, built on first use (encoding never needs it).

    One ``searchsorted`` over every distinct table at once: row c is shifted by
    ``c * 2 * TOTAL``, above every value and query of the rows before it.
    """
    tables, row_of = np.unique(CUM, axis=0, return_inverse=True)
    width = TOTAL >> _LUT_DROP
    t = np.arange(width, dtype=np.int64) << _LUT_DROP
    shift = (2 * TOTAL) * np.arange(tables.shape[0], dtype=np.int64)[:, None]
    flat = (tables + shift).ravel()
    first = (tables.shape[1] * np.arange(tables.shape[0], dtype=np.int64))[:, None] + 1
    lo = np.searchsorted(flat, t + shift, side="right") - first
    hi = np.searchsorted(flat, t + (1 << _LUT_DROP) - 1 + shift, side="right") - first
    return lo.astype(np.int8).ravel(), (lo == hi).ravel(), row_of.ravel() * width


class RangeDecoder:
    """Decoder state for many lanes at once; lane i reads ``data[start[i] : end[i]]``.

    Bytes past a lane's end read as zero.  ``bad`` marks lanes whose state
    became impossible (a corrupt lane that still passed its CRC); ``reads``
    counts the bytes each lane took after its first four.  ``lanes``
    arguments are index arrays or slices into the lane arrays.
    """

    def __init__(self, data: np.ndarray, start: np.ndarray, end: np.ndarray):
        self.data = np.concatenate([np.asarray(data, dtype=np.uint8), np.zeros(1, np.uint8)])
        self.pos = start.astype(np.int64).copy()
        self.end = end.astype(np.int64)
        self.rng = np.full(start.size, _MASK32, dtype=np.int64)
        self.value = np.zeros(start.size, dtype=np.int64)
        self.bad = np.zeros(start.size, dtype=bool)
        self.reads = np.zeros(start.size, dtype=np.int64)
        lanes = np.arange(start.size)
        for _ in range(4):
            self.value = (self.value << 8) | self._next(lanes)
        self.reads[:] = 0

    def _next(self, lanes) -> np.ndarray:
        p = self.pos[lanes]
        ok = p < self.end[lanes]
        b = self.data[np.where(ok, p, self.data.size - 1)].astype(np.int64)
        self.pos[lanes] = p + 1
        self.reads[lanes] += 1
        return b

    def _renorm(self, lanes) -> None:
        for _ in range(3):
            need = self.rng[lanes] < _TOP
            if not need.any():
                return
            if isinstance(lanes, slice):
                need = np.flatnonzero(need) + (lanes.start or 0)
            else:
                need = lanes[need]
            self.value[need] = ((self.value[need] << 8) | self._next(need))
            self.rng[need] <<= 8

    def symbol(self, lanes, row: np.ndarray) -> np.ndarray:
        """Decode one model symbol per lane with cumulative table row ``row``."""
        r = self.rng[lanes] >> TOTAL_BITS
        val = self.value[lanes]
        t = np.minimum(val // r, TOTAL - 1)
        lut, lut_exact, lut_base = _lut()
        li = lut_base[row] + (t >> _LUT_DROP)
        s = lut[li].astype(np.int64)
        base = row * _W
        slow = ~lut_exact[li]
        if slow.any():  # t falls where a table step sits inside the lookup cell
            k = np.flatnonzero(slow)
            while True:
                more = (s[k] < _W - 2) & (_FLAT[base[k] + s[k] + 1] <= t[k])
                if not more.any():
                    break
                s[k] += more
        c0 = _FLAT[base + s]
        self._narrow(lanes, r, val - r * c0, r * (_FLAT[base + s + 1] - c0))
        return s

    def bits(self, lanes, width) -> np.ndarray:
        """Decode a ``width``-bit bypass value per lane (0 <= width <= 16)."""
        r = self.rng[lanes] >> width
        val = self.value[lanes]
        v = np.minimum(val // r, (np.int64(1) << width) - 1)
        self._narrow(lanes, r, val - r * v, r)
        return v

    def long_bits(self, lanes: np.ndarray, width: np.ndarray) -> np.ndarray:
        """A bypass value of up to 64 bits, as chunks of <= 16 bits, most significant first."""
        out = np.zeros(lanes.size, dtype=np.int64)
        rem = np.asarray(width, dtype=np.int64).copy()
        while (rem > 0).any():
            cw = np.minimum(rem, _BYPASS_MAX)
            rem = rem - cw
            sel = cw > 0
            v = self.bits(lanes[sel], cw[sel])
            out[sel] = (out[sel] << cw[sel]) | v
        return out

    def _narrow(self, lanes, r, val, rng) -> None:
        bad = val >= rng
        if bad.any():
            self.bad[np.arange(self.bad.size)[lanes][bad]] = True
            val = np.minimum(val, rng - 1)
        self.value[lanes] = val
        self.rng[lanes] = rng
        self._renorm(lanes)


#: At most this many lanes still decoding: they finish one at a time in plain integers.
SCALAR_LANES = 8
_BIG_BITS = 53
_BIG = 1 << _BIG_BITS


@functools.cache
def _scalar_tables() -> tuple[list, list, list, list, list, list]:
    """The model and lookup tables as Python lists for :func:`_finish_scalar`, built on
    first use (like :func:`_lut`, so importing the coder stays cheap)."""
    lut, exact, base = _lut()
    return (CUM.tolist(), SHIFT.tolist(), lut.tolist(), exact.tolist(), base.tolist(),
            TRANSITIONS.tolist())


def _finish_scalar(dec: RangeDecoder, active: int, k0: int, nsorted, lstart, sym_row, sym_j,
                   hist, state, q, n: int, trellis, mean: bool = False) -> None:
    """Decode symbols ``k0`` on of lanes ``0 .. active - 1``, one lane at a time.

    The same arithmetic as the vector loop of :func:`decode_coefficients`, step
    for step (every read, every renormalisation, the same refusals), so a frame
    decodes to the same codes whether its batch is large or small.
    """
    data = dec.data.tolist()
    rows_l, js_l = sym_row.tolist(), sym_j.tolist()
    tr = None if trellis is None else trellis.tolist()
    for lane in range(active):
        _scalar_lane(dec, lane, data, k0, int(nsorted[lane]), int(lstart[lane]), rows_l, js_l,
                     hist[:, lane].tolist(), int(state[lane]), q, n, tr,
                     MEAN_LEN_ROW if mean else LEN_ROW)


def _scalar_lane(dec: RangeDecoder, lane: int, data: list, k0: int, k1: int, idx0: int,
                 rows_l: list, js_l: list, h: list, st: int, q: np.ndarray, n: int,
                 tr: list | None, first_row: int = LEN_ROW) -> None:
    """Symbols ``k0 .. k1 - 1`` of one lane (see :func:`_finish_scalar`)."""
    pos, end = int(dec.pos[lane]), int(dec.end[lane])
    rng, value = int(dec.rng[lane]), int(dec.value[lane])
    bad, reads = bool(dec.bad[lane]), int(dec.reads[lane])
    zero = data[-1]  # the zero byte read past a lane's end
    cum_rows, shift, lut, exact, base, transitions = _scalar_tables()
    top_w = _W - 2

    def narrow(val: int, new_rng: int) -> None:
        nonlocal rng, value, bad, pos, reads
        if val >= new_rng:
            bad = True
            val = new_rng - 1
        value, rng = val, new_rng
        for _ in range(3):
            if rng >= _TOP:
                break
            value = (value << 8) | (data[pos] if pos < end else zero)
            pos += 1
            reads += 1
            rng <<= 8

    def symbol(cls: int) -> int:
        r = rng >> TOTAL_BITS
        t = min(value // r, TOTAL - 1)
        li = base[cls] + (t >> _LUT_DROP)
        sym = lut[li]
        row_ = cum_rows[cls]
        if not exact[li]:
            while sym < top_w and row_[sym + 1] <= t:
                sym += 1
        c0 = row_[sym]
        narrow(value - r * c0, r * (row_[sym + 1] - c0))
        return sym

    def bits(width: int) -> int:
        r = rng >> width
        v = min(value // r, (1 << width) - 1)
        narrow(value - r * v, r)
        return v

    def long_bits(width: int) -> int:
        out = 0
        while width > 0:
            cw = min(width, _BYPASS_MAX)
            width -= cw
            out = (out << cw) | bits(cw)
        return out

    for k in range(k0, k1):
        row, j = rows_l[idx0 + k], js_l[idx0 + k]
        if j == 0:
            h = [0, 0, 0, 0]
            st = 0
            cls, s = first_row, 0  # coefficient 0's bit length: its own table
        else:
            tot = h[0] + h[1] + h[2] + h[3]
            u = (tot << 4) // min(j, CONTEXT_WINDOW)
            bl = math.frexp(float(u))[1]  # as the vector path: float64 exponent
            hb = (u >> max(bl - 2, 0)) & 1
            band = min(max(((j << 8) // n).bit_length() - 1, 0), _BANDS - 1)
            scale = min(max(2 * bl + hb - 5, 1), _SCALES - 1) if tot else 0
            cls = scale * _BANDS + band
            if tr is not None and tr[row]:
                cls += TRELLIS_BASE * (1 + (st >> 1))
            s = shift[cls]
        sym = symbol(cls)
        mag = sym
        if j == 0 or sym == MODEL_SYMBOLS:
            eb = sym if j == 0 else symbol(LEN_ROW)
            low = long_bits(max(eb - 1, 0))
            e = ((1 << (eb - 1)) | low) if eb > 0 else 0
            mag = e if j == 0 else e + MODEL_SYMBOLS
        over = mag >= _BIG or (mag > 0 and mag.bit_length() + s > _BIG_BITS)
        if s:
            mag = (mag << s) | long_bits(s)
        if over:
            bad = True
            mag = 0
        val = mag
        if mag and bits(1) == 1:
            val = -mag
        q[row, j] = val
        if tr is not None:
            st = transitions[st][mag & 1]
        h = [mag, h[0], h[1], h[2]]
    dec.pos[lane], dec.rng[lane], dec.value[lane] = pos, rng, value
    dec.bad[lane], dec.reads[lane] = bad, reads


def decode_coefficients(data: np.ndarray, start: np.ndarray, end: np.ndarray,
                        lane_of_row: np.ndarray, count: np.ndarray, n: int,
                        trellis: np.ndarray | None = None, mean: bool = False
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Decode the coded coefficients of subframes (rows) in lanes ``data[start:end]``.

    Rows of one lane are decoded in row order; row i, in lane
    ``lane_of_row[i]``, has ``count[i]`` coefficients.  The inverse of
    :func:`coefficient_ops` + :func:`encode_lanes`.  Returns ``(q, bad, reads)``:
    per lane, whether its state became impossible and the bytes it read
    after its first four.  ``trellis``: layout 4, per row, and ``mean`` (see
    :func:`coefficient_ops`).
    """
    ns = count.size
    lanes_n = start.size
    q = np.zeros((ns, n), dtype=np.int64)
    per_lane = np.bincount(lane_of_row, weights=count, minlength=lanes_n).astype(np.int64)
    # Lanes sorted longest first, so the lanes still decoding are a prefix (slices, no gathers).
    order = np.argsort(-per_lane, kind="stable")
    rank = np.empty_like(order)
    rank[order] = np.arange(lanes_n)
    dec = RangeDecoder(data, start[order], end[order])
    if ns == 0 or lanes_n == 0:
        return q, dec.bad[rank], dec.reads[rank]
    srow = np.argsort(rank[lane_of_row], kind="stable")  # rows in sorted-lane order
    cnt_s = count[srow]
    tot = int(cnt_s.sum())
    sym_row = np.repeat(srow, cnt_s)
    sym_j = np.arange(tot) - np.repeat(np.cumsum(cnt_s) - cnt_s, cnt_s)
    nsorted = per_lane[order]
    lstart = np.cumsum(nsorted) - nsorted
    hist = np.zeros((CONTEXT_WINDOW, lanes_n), dtype=np.int64)
    state = np.zeros(lanes_n, dtype=np.int64)  # layout 4: trellis state of each lane
    active = lanes_n
    for k in range(int(nsorted[0])):
        while active and nsorted[active - 1] <= k:
            active -= 1
        if active <= SCALAR_LANES:
            # Few lanes left (a frame decoded alone, or the longest lanes of a batch): one
            # lane at a time in plain integers, far cheaper than a vector step per symbol.
            _finish_scalar(dec, active, k, nsorted, lstart, sym_row, sym_j, hist, state, q,
                           n, trellis, mean)
            break
        lanes = slice(0, active)
        idx = lstart[:active] + k
        row = sym_row[idx]
        j = sym_j[idx]
        first = j == 0
        h = hist[:, :active]
        h[:, first] = 0
        tot_ctx = h.sum(axis=0)
        cls = context_class(tot_ctx, np.minimum(j, CONTEXT_WINDOW), j, n)
        if trellis is not None:
            st = state[:active]
            st[first] = 0
            cls += np.where(trellis[row], TRELLIS_BASE * (1 + (st >> 1)), 0)
        cls[first] = MEAN_LEN_ROW if mean else LEN_ROW
        s = SHIFT[cls]
        s[first] = 0
        sym = dec.symbol(lanes, cls)
        esc = ~first & (sym == MODEL_SYMBOLS)
        mag = sym
        lng = first | esc
        if lng.any():
            li = np.flatnonzero(lng)
            eb = np.where(first[li], sym[li], 0)
            ei = np.flatnonzero(esc[li])
            if ei.size:
                eb[ei] = dec.symbol(li[ei], np.full(ei.size, LEN_ROW))
            low = dec.long_bits(li, np.maximum(eb - 1, 0))
            e = np.where(eb > 0, (np.int64(1) << np.maximum(eb - 1, 0)) | low, 0)
            mag[li] = np.where(first[li], e, e + MODEL_SYMBOLS)
        # A magnitude of 2**53 or more is no code of ours (the encoder keeps codes below
        # 2**52): the lane is corrupt, and the shift below must not wrap.
        over = (mag < 0) | (mag >= _BIG) | ((mag > 0) & (_bit_length(np.minimum(mag, _BIG))
                                                        + s > _BIG_BITS))
        si = np.flatnonzero(s)
        if si.size:  # the s low bits
            mag[si] = (mag[si] << s[si]) | dec.long_bits(si, s[si])
        if over.any():
            dec.bad[np.flatnonzero(over)] = True
            mag[over] = 0
        zi = np.flatnonzero(mag)
        val = mag
        if zi.size:  # sign of each non-zero
            neg = dec.bits(zi, 1) == 1
            val = mag.copy()
            val[zi[neg]] = -mag[zi[neg]]
        q[row, j] = val
        if trellis is not None:
            st[:] = TRANSITIONS[st, mag & 1]
        h[1:] = h[:-1].copy()
        h[0] = mag
    return q, dec.bad[rank], dec.reads[rank]
