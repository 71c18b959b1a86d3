"""Forward error correction on a byte stream: none, Hamming (7,4), RS(255,223), K=7 r=1/2.

Each code turns the codec's byte stream into channel bits and back, and counts
every bit it puts on air (parity, padding to a whole block, sync markers,
trellis tail).  Decoders work on all blocks at once.

References
----------
R. W. Hamming, "Error detecting and error correcting codes", Bell Syst. Tech.
J. 29, 1950.  CCSDS 131.0-B, *TM Synchronization and Channel Coding* (Blue
Book): RS(255,223) over GF(2^8) with field polynomial x^8+x^7+x^2+x+1,
generator roots alpha^(11 j), j = 112..143, interleaving depth I, 32-bit
attached sync marker 0x1ACFFC1D; convolutional code K=7, r=1/2, generators
171/133 octal with the G2 output inverted (sec. 3.3).  A. J. Viterbi, "Error
bounds for convolutional codes and an asymptotically optimum decoding
algorithm", IEEE Trans. IT-13, 1967.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from ._fec_base import Code, DecodeStats, as_u8
from ._registry import NamedRegistry

__all__ = ["FEC_NAMES", "Code", "DecodeStats", "NoCode", "Hamming74", "ReedSolomon255",
           "Convolutional", "make_code", "register_fec", "unregister_fec", "fec_names", "GF_EXP",
           "GF_LOG", "rs_generator_roots"]


class NoCode(Code):
    """Uncoded: the bytes go on air as they are.

    Attributes
    ----------
    name, rate, soft
        ``"none"``, 1.0 and False (see :class:`Code`).

    Examples
    --------
    >>> import numpy as np
    >>> code = NoCode()
    >>> bits = code.encode(b"\\x0f")
    >>> bits.tolist(), code.decode(bits, 1)[0].tobytes()
    ([0, 0, 0, 0, 1, 1, 1, 1], b'\\x0f')
    """

    name = "none"
    rate = 1.0

    def channel_bits(self, n_bytes: int) -> int:
        return 8 * n_bytes

    def encode(self, data) -> np.ndarray:
        return np.unpackbits(as_u8(data))

    def decode(self, received: np.ndarray, n_bytes: int):
        return np.packbits(received[: 8 * n_bytes]), DecodeStats()


# Hamming (7,4) in Hamming's positional form: positions 1..7, parity bits at
# 1, 2, 4; the syndrome read as a binary number is the position in error.
_H = np.array([[(p >> k) & 1 for p in range(1, 8)] for k in range(3)], dtype=np.uint8)  # 3 x 7
_DATA_POS = np.array([3, 5, 6, 7]) - 1
_G = np.zeros((4, 7), dtype=np.uint8)
for _i, _p in enumerate(_DATA_POS):
    _G[_i, _p] = 1
    for _k in range(3):  # parity bit at position 2**k covers positions with bit k set
        if (_p + 1) >> _k & 1:
            _G[_i, (1 << _k) - 1] = 1


class Hamming74(Code):
    """Hamming (7,4): every 4-bit nibble becomes 7 bits; corrects one error per codeword."""

    name = "hamming74"
    rate = 4 / 7
    G = _G
    H = _H

    def channel_bits(self, n_bytes: int) -> int:
        return 14 * n_bytes

    def encode_nibbles(self, msg: np.ndarray) -> np.ndarray:
        """(M, 4) message bits -> (M, 7) codewords."""
        return (msg.astype(np.int64) @ _G % 2).astype(np.uint8)

    def decode_words(self, words: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(M, 7) received -> ((M, 4) corrected message bits, corrected mask)."""
        syn = (words.astype(np.int64) @ _H.T) % 2
        pos = syn @ np.array([1, 2, 4])  # 1-based error position, 0 = none
        fixed = words.copy()
        hit = np.flatnonzero(pos)
        fixed[hit, pos[hit] - 1] ^= 1
        return fixed[:, _DATA_POS], pos > 0

    def encode(self, data) -> np.ndarray:
        return self.encode_nibbles(np.unpackbits(as_u8(data)).reshape(-1, 4)).ravel()

    def decode(self, received: np.ndarray, n_bytes: int):
        words = received[: 14 * n_bytes].reshape(-1, 7)
        msg, corrected = self.decode_words(words)
        return np.packbits(msg.ravel()), DecodeStats(words.shape[0], 0,
                                                     {"corrected": int(corrected.sum())})


# GF(2^8) with the CCSDS field polynomial x^8 + x^7 + x^2 + x + 1 (0x187), alpha = x.
_PRIM = 0x187
GF_EXP = np.zeros(512, dtype=np.int64)
GF_LOG = np.zeros(256, dtype=np.int64)
_v = 1
for _e in range(255):
    GF_EXP[_e] = _v
    GF_LOG[_v] = _e
    _v <<= 1
    if _v & 0x100:
        _v ^= _PRIM
GF_EXP[255:510] = GF_EXP[:255]


_A = np.arange(256)
#: Full multiplication table, built from the log/antilog tables (zero rows/columns stay 0).
GF_MUL = np.where((_A[:, None] == 0) | (_A[None, :] == 0), 0,
                  GF_EXP[GF_LOG[_A][:, None] + GF_LOG[_A][None, :]])


def _gf_mul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Element-wise product in GF(2^8) (table lookup)."""
    return GF_MUL[np.asarray(a, np.int64), np.asarray(b, np.int64)]


def _gf_div(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """a / b in GF(2^8) (b non-zero)."""
    a = np.asarray(a, np.int64)
    return np.where(a == 0, 0, GF_EXP[(GF_LOG[a] - GF_LOG[np.asarray(b, np.int64)]) % 255])


def _poly_at(coef: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Evaluate polynomials (rows of ``coef``, lowest degree first) at field elements ``x``.

    ``coef`` is (E, D); ``x`` is (E,) or (E, P) and the result has its shape
    (Horner's rule, one table lookup per degree for all rows and points).
    """
    x = np.asarray(x, np.int64)
    c = coef if x.ndim == 1 else coef[:, :, None]
    val = np.zeros(x.shape, np.int64)
    for d in range(coef.shape[1] - 1, -1, -1):
        val = GF_MUL[val, x] ^ c[:, d]
    return val


def _rs_correct(words: np.ndarray, syn: np.ndarray, fcr_log: int, step: int,
                t: int) -> tuple[np.ndarray, np.ndarray]:
    """Errors-only RS decoding of many words at once: Berlekamp-Massey, Chien, Forney.

    ``syn[:, j] = r(beta^(fcr + j))`` with beta = alpha^step and ``fcr_log`` =
    log_alpha of the first root.  An error of value e at degree p gives
    ``S_j = e X^(fcr) X^j`` with locator X = beta^p, so Forney's formula with
    first root index fcr applies: e = X^(1 - fcr) Omega(X^-1) / Lambda'(X^-1).
    Returns the corrected words and a mask of words found uncorrectable.

    References
    ----------
    J. L. Massey, "Shift-register synthesis and BCH decoding", IEEE Trans. IT-15,
    1969; G. D. Forney, "On decoding BCH codes", IEEE Trans. IT-11, 1965.
    """
    M, n2 = syn.shape
    fcr = (fcr_log * pow(step, -1, 255)) % 255  # root index: beta^fcr = alpha^fcr_log
    rows = np.arange(M)
    cols = np.arange(n2 + 1)
    lam = np.zeros((M, n2 + 1), np.int64)
    lam[:, 0] = 1
    prev = lam.copy()
    L = np.zeros(M, np.int64)
    shift = np.ones(M, np.int64)
    bval = np.ones(M, np.int64)
    for k in range(n2):  # Berlekamp-Massey, every word in step
        d = syn[:, k].copy()
        if k:
            d ^= np.bitwise_xor.reduce(_gf_mul(lam[:, 1: k + 1], syn[:, k - 1:: -1]), axis=1)
        nz = d != 0
        idx = cols[None, :] - shift[:, None]
        moved = np.where(idx >= 0, prev[rows[:, None], np.maximum(idx, 0)], 0)
        new = lam ^ _gf_mul(_gf_div(d, bval)[:, None], moved)
        grow = nz & (2 * L <= k)
        prev = np.where(grow[:, None], lam, prev)
        bval = np.where(grow, d, bval)
        L = np.where(grow, k + 1 - L, L)
        shift = np.where(grow, 1, shift + 1)
        lam = np.where(nz[:, None], new, lam)
    lam = lam[:, : t + 1]
    bad = L > t
    # Chien search: X^-1 = beta^-p for every degree p.
    p = np.arange(255)
    vals = _poly_at(lam, np.broadcast_to(GF_EXP[(-step * p) % 255], (M, 255)))
    roots = (vals == 0) & ~bad[:, None]
    bad |= roots.sum(axis=1) != L
    roots &= ~bad[:, None]
    # Forney on every root found.
    r, deg = np.nonzero(roots)
    omega = np.zeros((M, n2), np.int64)  # S(x) Lambda(x) mod x^2t
    for i in range(t + 1):
        omega[:, i:] ^= _gf_mul(lam[:, i: i + 1], syn[:, : n2 - i])
    dlam = np.where(np.arange(t + 1) % 2 == 1, lam, 0)[:, 1:]  # formal derivative
    inv = GF_EXP[(-step * deg) % 255]
    num = _poly_at(omega[r], inv)
    den = _poly_at(dlam[r], inv)
    e = _gf_mul(_gf_div(num, np.where(den == 0, 1, den)),
                GF_EXP[(step * deg * (1 - fcr)) % 255])
    zero_den = np.zeros(M, bool)
    zero_den[r[den == 0]] = True
    bad |= zero_den
    out = words.copy()
    ok = ~bad[r]
    out[r[ok], 254 - deg[ok]] ^= e[ok]
    return out, bad


def rs_generator_roots() -> np.ndarray:
    """Exponents of the 32 generator roots alpha^(11 j), j = 112..143 (CCSDS 131.0-B)."""
    return (11 * np.arange(112, 144)) % 255


def _rs_generator() -> np.ndarray:
    g = np.array([1], dtype=np.int64)  # highest degree first
    for e in rs_generator_roots():
        root = GF_EXP[e]
        shifted = np.concatenate([g, [0]])
        scaled = np.concatenate([[0], _gf_mul(g, root)])
        g = shifted ^ scaled  # g(x) * (x - root), minus = plus in GF(2^m)
    return g


class ReedSolomon255(Code):
    """CCSDS RS(255,223), interleaving depth I, one 32-bit sync marker per codeblock.

    The stream is cut into codeblocks of 223*I bytes (the last one padded with
    zeros, counted on air).  Byte j of a codeblock belongs to codeword j mod I,
    so a burst of 16*I consecutive bytes puts at most 16 errors in each codeword.
    Encoding, syndromes and Berlekamp-Massey/Chien/Forney correction are
    vectorized NumPy over every codeword at once (log/antilog and product
    tables); the corrected words are re-checked by syndrome, so a decoder
    failure is always reported, never passed on as good.  The ``reedsolo``
    library (test extra) serves as the reference decoder in the tests.
    Symbols are in the conventional basis (the CCSDS dual-basis representation
    is a fixed one-to-one byte mapping at the interface; it does not change what
    the code corrects, so it is left out).

    Parameters
    ----------
    depth : int
        Interleaving depth I, 1 to 8.

    Examples
    --------
    The code corrects any t = (255 - 223) / 2 = 16 symbol errors in a word
    (CCSDS 131.0-B) and reports a word with 17 as failed:

    >>> import numpy as np
    >>> rs = ReedSolomon255()
    >>> rng = np.random.default_rng(0)
    >>> word = rs.encode_words(rng.integers(0, 256, (1, 223)))
    >>> bad = word.copy()
    >>> where = rng.choice(255, 17, replace=False)
    >>> bad[0, where[:16]] ^= 0x5A
    >>> fixed, failed = rs.decode_words(bad)
    >>> bool(np.array_equal(fixed, word)), failed.tolist()
    (True, [False])
    >>> bad[0, where[16]] ^= 0x5A
    >>> rs.decode_words(bad)[1].tolist()
    [True]
    """

    name = "rs255"
    n, k, t = 255, 223, 16
    ASM_BITS = 32

    def __init__(self, depth: int = 1):
        if not 1 <= depth <= 8:
            raise ValueError("CCSDS interleaving depth must be 1 to 8")
        self.depth = depth
        self.gen = _rs_generator()
        self._roots = rs_generator_roots()
        # Row j = multiplication by root j, flattened for np.take.
        self._mul_roots = GF_MUL[GF_EXP[self._roots], :].astype(np.uint8).ravel()
        self._mul_offsets = (256 * np.arange(self._roots.size)).astype(np.int32)

    @property
    def rate(self) -> float:
        return self.k / self.n

    def blocks(self, n_bytes: int) -> int:
        return max(1, -(-n_bytes // (self.k * self.depth)))

    def channel_bits(self, n_bytes: int) -> int:
        return self.blocks(n_bytes) * (self.depth * self.n * 8 + self.ASM_BITS)

    def encode_words(self, msg: np.ndarray) -> np.ndarray:
        """(M, 223) message symbols -> (M, 255) systematic codewords (LFSR over all M)."""
        msg = np.asarray(msg, np.int64)
        reg = np.zeros((msg.shape[0], 32), np.int64)
        g = self.gen[1:]
        for j in range(self.k):
            fb = msg[:, j] ^ reg[:, 0]
            reg[:, :-1] = reg[:, 1:]
            reg[:, -1] = 0
            reg ^= _gf_mul(fb[:, None], g[None, :])
        return np.concatenate([msg, reg], axis=1)

    def syndromes(self, words: np.ndarray) -> np.ndarray:
        """(M, 255) -> (M, 32) syndromes r(alpha^(11 j)); all zero for a codeword.

        Horner's rule over the 255 symbols, every word and root in one lookup per symbol.
        """
        w = np.asarray(words).astype(np.uint8)
        s = np.zeros((w.shape[0], self._roots.size), np.uint8)
        for k in range(self.n):  # s <- s * root_j + r_k, via one flat lookup per symbol
            s = np.take(self._mul_roots, s + self._mul_offsets) ^ w[:, k: k + 1]
        return s.astype(np.int64)

    def decode_words(self, words: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(M, 255) received -> ((M, 255) corrected words, failed mask).

        Codewords with non-zero syndromes are corrected all at once by
        :func:`_rs_correct`; the result is re-checked by syndrome, so a word the
        decoder cannot correct is always reported as failed.
        """
        words = np.asarray(words, np.int64).copy()
        syn = self.syndromes(words)
        dirty = np.flatnonzero(syn.any(axis=1))
        failed = np.zeros(words.shape[0], bool)
        if dirty.size:
            fixed, bad = _rs_correct(words[dirty], syn[dirty], self._roots[0], 11, self.t)
            good = ~bad
            good[good] = ~self.syndromes(fixed[good]).any(axis=1)
            words[dirty[good]] = fixed[good]
            failed[dirty[~good]] = True
        return words, failed

    def decode_words_reedsolo(self, words: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Same as :meth:`decode_words` through the ``reedsolo`` library (reference, slow)."""
        import reedsolo  # test extra only

        # reedsolo wants the generator as a field element value: alpha^11.
        codec = reedsolo.RSCodec(nsym=32, nsize=255, fcr=112, prim=_PRIM,
                                 generator=int(GF_EXP[11]), c_exp=8)
        words = np.asarray(words, np.int64).copy()
        failed = np.zeros(words.shape[0], bool)
        for i in np.flatnonzero(self.syndromes(words).any(axis=1)):
            try:
                _, full, _ = codec.decode(bytearray(words[i].astype(np.uint8).tobytes()))
                words[i] = np.frombuffer(bytes(full), np.uint8)
            except reedsolo.ReedSolomonError:
                failed[i] = True
        return words, failed

    def encode(self, data) -> np.ndarray:
        data = as_u8(data)
        nb, depth = self.blocks(data.size), self.depth
        buf = np.zeros(nb * self.k * depth, np.uint8)
        buf[: data.size] = data
        msg = buf.reshape(nb, self.k, depth).transpose(0, 2, 1).reshape(-1, self.k)
        cw = self.encode_words(msg).astype(np.uint8).reshape(nb, depth, self.n)
        air = cw.transpose(0, 2, 1).reshape(nb, self.n * depth)  # symbol-interleaved
        asm = np.tile(np.frombuffer(b"\x1a\xcf\xfc\x1d", np.uint8), (nb, 1))
        return np.unpackbits(np.concatenate([asm, air], axis=1).ravel())

    def decode(self, received: np.ndarray, n_bytes: int):
        nb, depth = self.blocks(n_bytes), self.depth
        # Codeblock synchronisation on the marker is assumed (marker bits are
        # counted on air but not searched for).
        byt = np.packbits(received[: self.channel_bits(n_bytes)]).reshape(nb, -1)[:, 4:]
        words = byt.reshape(nb, self.n, depth).transpose(0, 2, 1).reshape(-1, self.n)
        fixed, failed = self.decode_words(words)
        msg = fixed[:, : self.k].astype(np.uint8).reshape(nb, depth, self.k)
        out = msg.transpose(0, 2, 1).reshape(-1)[:n_bytes]
        return out, DecodeStats(words.shape[0], int(failed.sum()))


# Convolutional code K=7, r=1/2, generators 171 and 133 octal.  Register r has
# the current input at bit 6 and the input six steps back at bit 0; the state
# is the six previous inputs (newest at bit 5).  CCSDS 131.0-B sec. 3.3 inverts
# the G2 output (C2 is sent as its complement), so an all-zero input still puts
# symbol transitions on air; _INVERT marks which outputs are inverted.
_K = 7
_GENS = (0o171, 0o133)
_INVERT = (0, 1)
_NSTATE = 1 << (_K - 1)


def _parity(v: np.ndarray) -> np.ndarray:
    v = v.copy()
    for s in (4, 2, 1):
        v ^= v >> s
    return v & 1


_NS = np.arange(_NSTATE)
_PRED = np.stack([((_NS & 31) << 1) | x for x in (0, 1)], axis=1)  # (64, 2) previous states
_REG = ((_NS >> 5) << 6)[:, None] | _PRED  # register for each (next state, branch)
# Expected BPSK amplitudes (+1 for bit 0) of the two outputs on each branch.
_EXPECT = np.stack([1.0 - 2.0 * (_parity(_REG & g) ^ inv) for g, inv in zip(_GENS, _INVERT)],
                   axis=-1).astype(np.float32)
#: Index (0..3) of each branch's output pair in the order ++, +-, -+, --.
_PAIR = ((_EXPECT[..., 0] < 0) * 2 + (_EXPECT[..., 1] < 0)).astype(np.intp)


class Convolutional(Code):
    """K=7, r=1/2 (171/133, G2 inverted) code in terminated blocks, soft-decision Viterbi.

    The symbols are those of CCSDS 131.0-B: per input bit, C1 (generator 171
    octal) then the complement of C2 (generator 133 octal).

    The stream is cut into blocks of ``block_bytes`` (last one zero-padded,
    counted on air); each block ends with 6 zero tail bits so the trellis ends
    in state 0.  The Viterbi recursion steps through the trellis once, with
    every block and every state handled in one array operation per step.
    With hard-decision channels (BSC, bursts) the same decoder runs on +/-1.

    Parameters
    ----------
    block_bytes : int
        Information bytes per terminated block.

    Examples
    --------
    One input 1 changes 10 output bits, the free distance of the (171, 133)
    code (CCSDS 131.0-B; the sum of the generators' weights, 5 + 5); a block
    with 4 scattered channel-bit errors still decodes:

    >>> import numpy as np
    >>> c = Convolutional()
    >>> zeros = np.zeros((1, 20), np.uint8)
    >>> one = zeros.copy()
    >>> one[0, 0] = 1
    >>> int((c.encode_bits(one) ^ c.encode_bits(zeros)).sum())
    10
    >>> data = np.random.default_rng(0).integers(0, 256, 256, dtype=np.uint8)
    >>> rx = c.encode(data)
    >>> rx[[100, 900, 2000, 3500]] ^= 1
    >>> out, stats = c.decode(rx, data.size)
    >>> bool(np.array_equal(out, data)), c.rate
    (True, 0.5)
    """

    name = "conv"
    soft = True
    rate = 0.5

    def __init__(self, block_bytes: int = 256):
        self.block_bytes = block_bytes

    def blocks(self, n_bytes: int) -> int:
        return max(1, -(-n_bytes // self.block_bytes))

    def channel_bits(self, n_bytes: int) -> int:
        return self.blocks(n_bytes) * 2 * (8 * self.block_bytes + _K - 1)

    def encode_bits(self, u: np.ndarray) -> np.ndarray:
        """(B, L) info bits (tail included) -> (B, L, 2) coded bits (C1, inverted C2)."""
        u = u.astype(np.uint8)
        B, L = u.shape
        padded = np.concatenate([np.zeros((B, _K - 1), np.uint8), u], axis=1)
        out = np.zeros((B, L, 2), np.uint8)
        for j, g in enumerate(_GENS):
            for d in range(_K):  # tap d = input d steps back (bit 6 - d of the generator)
                if g >> (_K - 1 - d) & 1:
                    out[:, :, j] ^= padded[:, _K - 1 - d: _K - 1 - d + L]
            out[:, :, j] ^= _INVERT[j]
        return out

    def viterbi(self, y: np.ndarray) -> np.ndarray:
        """(B, L, 2) soft values (positive = 0) -> (B, L) ML info bits, ending in state 0.

        Branch metrics are correlations with the expected +/-1 outputs, worked
        out for the four output pairs at every step at once; the
        add-compare-select then runs one step at a time over every block and state.
        """
        B, L, _ = y.shape
        pairs = np.array([[1, 1], [1, -1], [-1, 1], [-1, -1]], np.float32)
        bm = np.ascontiguousarray(np.einsum("blk,ck->lbc", y.astype(np.float32), pairs))
        p0, p1 = _PRED[:, 0], _PRED[:, 1]
        i0, i1 = _PAIR[:, 0], _PAIR[:, 1]
        pm = np.full((B, _NSTATE), -1e30, np.float32)  # only state 0 at the start
        pm[:, 0] = 0.0
        dec = np.empty((L, B, _NSTATE), bool)
        for t in range(L):
            b = bm[t]
            c0 = pm[:, p0] + b[:, i0]
            c1 = pm[:, p1] + b[:, i1]
            np.greater(c1, c0, out=dec[t])
            pm = np.maximum(c0, c1)
            if t % 64 == 63:  # keep float32 metrics small
                pm -= pm.max(axis=1, keepdims=True)
        state = np.zeros(B, np.int64)
        bits = np.empty((B, L), np.uint8)
        rows = np.arange(B)
        for t in range(L - 1, -1, -1):
            bits[:, t] = state >> 5
            state = _PRED[state, dec[t, rows, state].astype(np.intp)]
        return bits

    def encode(self, data) -> np.ndarray:
        data = as_u8(data)
        nb = self.blocks(data.size)
        buf = np.zeros(nb * self.block_bytes, np.uint8)
        buf[: data.size] = data
        u = np.unpackbits(buf.reshape(nb, -1), axis=1)
        u = np.concatenate([u, np.zeros((nb, _K - 1), np.uint8)], axis=1)
        return self.encode_bits(u).ravel()

    def decode(self, received: np.ndarray, n_bytes: int):
        nb = self.blocks(n_bytes)
        r = received[: self.channel_bits(n_bytes)]
        y = r.astype(np.float32) if r.dtype != np.uint8 else 1.0 - 2.0 * r.astype(np.float32)
        u = self.viterbi(y.reshape(nb, -1, 2))[:, : 8 * self.block_bytes]
        return np.packbits(u, axis=1).ravel()[:n_bytes], DecodeStats(nb, 0)


#: The codes by name, each made from its interleaving depth.  A new code is one file
#: (a :class:`Code` subclass, importing only ``link_sim._fec_base``) plus one line
#: here, or one :func:`register_fec` call (DEVELOPERS.md, "Adding an FEC code").
_FACTORIES = NamedRegistry("FEC code", {
    "none": lambda interleave: NoCode(),
    "hamming74": lambda interleave: Hamming74(),
    "rs255": ReedSolomon255,
    "conv": lambda interleave: Convolutional(),
})

#: The names of the built-in codes, in the order the command line lists them.
FEC_NAMES = _FACTORIES.builtins


def register_fec(name: str, factory: Callable[[int], Code]) -> None:
    """Offer a further FEC code to ``simulate``, ``budget`` and link files.

    Parameters
    ----------
    name : str
        The name users give (``--fec NAME``, ``fec = "NAME"``); must be new.
    factory : callable
        ``factory(interleave) -> Code``; codes without interleaving ignore it.

    Examples
    --------
    >>> from link_sim import NoCode, fec_names, make_code, register_fec
    >>> class Repeat3(NoCode):
    ...     name, rate = "repeat3", 1 / 3
    >>> register_fec("repeat3", lambda interleave: Repeat3())
    >>> "repeat3" in fec_names(), make_code("repeat3").rate
    (True, 0.3333333333333333)
    >>> unregister_fec("repeat3")
    """
    _FACTORIES.add(name, factory)


def unregister_fec(name: str) -> None:
    """Withdraw a code added by :func:`register_fec` (the built-in ones stay).

    Parameters
    ----------
    name : str
        The registered name; an unknown name is ignored.

    Examples
    --------
    >>> unregister_fec("conv")
    Traceback (most recent call last):
    ...
    ValueError: the built-in FEC code 'conv' cannot be withdrawn
    """
    _FACTORIES.remove(name)


def fec_names() -> tuple[str, ...]:
    """Every code name on offer: the built-in ones, then the registered ones.

    Returns
    -------
    tuple of str
        In the order the command line lists them.

    Examples
    --------
    >>> fec_names()[:4]
    ('none', 'hamming74', 'rs255', 'conv')
    """
    return _FACTORIES.names()


def make_code(name: str, interleave: int = 1) -> Code:
    """The code called ``name`` (one of :func:`fec_names`).

    Parameters
    ----------
    name : str
        ``none``, ``hamming74``, ``rs255``, ``conv`` or a name given to :func:`register_fec`.
    interleave : int
        Interleaving depth of ``rs255``.

    Returns
    -------
    Code
        ``encode(bytes) -> bits`` and ``decode(received, n_bytes) -> (bytes, stats)``.

    Raises
    ------
    ValueError
        For an unknown name.

    Examples
    --------
    >>> [round(make_code(name).rate, 4) for name in FEC_NAMES]
    [1.0, 0.5714, 0.8745, 0.5]
    """
    return _FACTORIES.get(name)(interleave)
