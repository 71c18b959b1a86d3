"""Channel models on whole bit arrays (uint8 0/1), with seeded local generators.

Every function takes a ``numpy.random.Generator`` and never touches global
random state.  Bits are one per byte (``np.unpackbits`` layout) so a channel
can act on all of them at once.

References
----------
J. G. Proakis and M. Salehi, *Digital Communications*, 5th ed., 2008 (AWGN,
coherent BPSK / Gray QPSK).  E. N. Gilbert, "Capacity of a burst-noise
channel", Bell Syst. Tech. J. 39, 1960; E. O. Elliott, "Estimates of error
rates for codes on burst-noise channels", Bell Syst. Tech. J. 42, 1963.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._theory import db_to_linear

__all__ = ["bsc", "awgn", "GilbertElliott", "gilbert_elliott", "erase_frames", "MODULATIONS"]

MODULATIONS = ("bpsk", "qpsk")


def bsc(bits: np.ndarray, ber: float, rng: np.random.Generator) -> np.ndarray:
    """Binary symmetric channel: flip each bit independently with probability ``ber``.

    Parameters
    ----------
    bits : ndarray of uint8
        Channel bits (0/1), one per byte.
    ber : float
        Flip probability, 0 to 1.
    rng : numpy.random.Generator
        The random source.

    Returns
    -------
    ndarray of uint8
        The received bits.

    Examples
    --------
    The measured flip rate lies within a few standard errors sqrt(p / n) of ``ber``:

    >>> import numpy as np
    >>> rng = np.random.default_rng(0)
    >>> bits = rng.integers(0, 2, 10**6, dtype=np.uint8)
    >>> rate = np.mean(bsc(bits, 0.01, rng) != bits)
    >>> bool(abs(rate - 0.01) < 4 * np.sqrt(0.01 / 1e6))
    True
    """
    if not 0.0 <= ber <= 1.0:
        raise ValueError("ber must lie in [0, 1]")
    flips = rng.random(bits.size, dtype=np.float32) < np.float32(ber)
    return bits ^ flips.view(np.uint8)


def awgn(bits: np.ndarray, ebn0_db: float, rng: np.random.Generator, modulation: str = "bpsk",
         rate: float = 1.0, soft: bool = False) -> np.ndarray:
    """Coherent BPSK or Gray-coded QPSK over additive white Gaussian noise.

    Parameters
    ----------
    bits : ndarray of uint8
        Channel bits (0/1).
    ebn0_db : float
        Energy per *information* bit over N0; each channel bit carries
        ``rate`` information bits, so Es/N0 per channel bit = rate * Eb/N0.
    rng : numpy.random.Generator
        The random source.
    modulation : {"bpsk", "qpsk"}
        QPSK maps bit pairs (even bit -> I, odd bit -> Q) with Gray labelling.
    rate : float
        Code rate: information bits per channel bit.
    soft : bool
        Return the matched-filter outputs (float32, unit amplitude, positive
        means 0) for a soft-decision decoder instead of hard bits.

    Returns
    -------
    ndarray
        Hard decisions (uint8 0/1), or the soft values with ``soft``.

    Examples
    --------
    The measured BER of both modulations agrees with the closed form
    Q(sqrt(2 Eb/N0)) (Proakis, sec. 4.3) within a few standard errors:

    >>> import numpy as np
    >>> from link_sim import ber_bpsk
    >>> rng = np.random.default_rng(0)
    >>> bits = rng.integers(0, 2, 10**6, dtype=np.uint8)
    >>> p = float(ber_bpsk(4.0))
    >>> [bool(abs(np.mean(awgn(bits, 4.0, rng, mod) != bits) - p) < 4 * np.sqrt(p / 1e6))
    ...  for mod in ("bpsk", "qpsk")]
    [True, True]
    """
    esn0 = float(db_to_linear(ebn0_db)) * rate  # per channel bit
    n = bits.size
    if modulation == "bpsk":
        sigma = np.float32(np.sqrt(1.0 / (2.0 * esn0)))
        y = rng.standard_normal(n, dtype=np.float32)
        y *= sigma
        y += 1.0 - 2.0 * bits.astype(np.float32)
    elif modulation == "qpsk":
        b = bits if n % 2 == 0 else np.concatenate([bits, np.zeros(1, np.uint8)])
        amp = np.float32(np.sqrt(0.5))  # unit symbol energy: Es(symbol) = 2 bits
        sym = (1.0 - 2.0 * b[0::2].astype(np.float32)) * amp \
            + 1j * (1.0 - 2.0 * b[1::2].astype(np.float32)) * amp
        n0 = 1.0 / (2.0 * esn0)  # symbol energy 1 = 2 channel bits
        noise = rng.standard_normal((2, sym.size), dtype=np.float32) * np.float32(np.sqrt(n0 / 2))
        r = sym + (noise[0] + 1j * noise[1]).astype(np.complex64)
        y = np.empty(b.size, np.float32)
        y[0::2] = r.real / amp
        y[1::2] = r.imag / amp
        y = y[:n]
    else:
        raise ValueError(f"unknown modulation {modulation!r}; use one of {MODULATIONS}")
    if soft:
        return y
    return (y < 0).view(np.uint8)


@dataclass(frozen=True)
class GilbertElliott:
    """Two-state burst-error channel.

    ``mean_burst`` is the mean stay in the bad state (bits), ``bad_fraction``
    the long-run share of bits spent in it; ``ber_good``/``ber_bad`` the
    error rates in each state.  Transition probabilities follow:
    P(bad -> good) = 1 / mean_burst, P(good -> bad) = P(bad -> good) * pi_B / (1 - pi_B).

    Parameters
    ----------
    mean_burst : float
        Mean stay in the bad state, bits (>= 1).
    bad_fraction : float
        Long-run share of bits in the bad state, in (0, 1).
    ber_good, ber_bad : float
        Bit error rate in each state.

    Examples
    --------
    The stationary probability of the bad state of the two-state Markov chain,
    P(g->b) / (P(g->b) + P(b->g)) (Gilbert 1960), is ``bad_fraction``:

    >>> import numpy as np
    >>> g = GilbertElliott(mean_burst=100, bad_fraction=0.1, ber_good=1e-4, ber_bad=0.1)
    >>> round(g.p_good_to_bad / (g.p_good_to_bad + g.p_bad_to_good), 12)
    0.1
    >>> round(g.stationary_ber(), 6)
    0.01009
    >>> share = g.states(10**6, np.random.default_rng(0)).mean()
    >>> bool(abs(share - 0.1) < 0.01)
    True
    """

    mean_burst: float
    bad_fraction: float
    ber_good: float
    ber_bad: float

    def __post_init__(self):
        if self.mean_burst < 1.0 or not 0.0 < self.bad_fraction < 1.0:
            raise ValueError("mean_burst must be >= 1 bit and 0 < bad_fraction < 1")

    @property
    def p_bad_to_good(self) -> float:
        return 1.0 / self.mean_burst

    @property
    def p_good_to_bad(self) -> float:
        return self.p_bad_to_good * self.bad_fraction / (1.0 - self.bad_fraction)

    def stationary_ber(self) -> float:
        """Long-run error rate: the stationary mix pi_G e_G + pi_B e_B."""
        pb = self.p_good_to_bad / (self.p_good_to_bad + self.p_bad_to_good)
        return (1.0 - pb) * self.ber_good + pb * self.ber_bad

    def states(self, n: int, rng: np.random.Generator) -> np.ndarray:
        """Bad-state mask of ``n`` bits: alternating geometric stays, drawn all at once."""
        mean_cycle = 1.0 / self.p_good_to_bad + 1.0 / self.p_bad_to_good
        start_bad = rng.random() < self.bad_fraction  # stationary start
        runs = np.zeros(0, np.int64)
        while runs.sum() < n:
            k = int(2 * n / mean_cycle) + 16
            p = np.array([self.p_bad_to_good, self.p_good_to_bad] if start_bad
                         else [self.p_good_to_bad, self.p_bad_to_good])
            more = rng.geometric(np.tile(p, k))  # stay lengths, alternating states
            runs = np.concatenate([runs, more])  # even count per chunk keeps alternation
        label = (np.arange(runs.size) % 2 == 0) == start_bad
        return np.repeat(label, runs)[:n]


def gilbert_elliott(bits: np.ndarray, model: GilbertElliott,
                    rng: np.random.Generator) -> np.ndarray:
    """Pass ``bits`` through the Gilbert-Elliott channel ``model``.

    Parameters
    ----------
    bits : ndarray of uint8
        Channel bits (0/1).
    model : GilbertElliott
        The channel.
    rng : numpy.random.Generator
        The random source.

    Returns
    -------
    ndarray of uint8
        The received bits.

    Examples
    --------
    >>> import numpy as np
    >>> g = GilbertElliott(mean_burst=100, bad_fraction=0.1, ber_good=1e-4, ber_bad=0.1)
    >>> rng = np.random.default_rng(0)
    >>> bits = rng.integers(0, 2, 10**6, dtype=np.uint8)
    >>> rate = np.mean(gilbert_elliott(bits, g, rng) != bits)
    >>> bool(abs(rate - g.stationary_ber()) < 0.1 * g.stationary_ber())  # bursts: wide spread
    True
    """
    bad = model.states(bits.size, rng)
    p = np.where(bad, np.float32(model.ber_bad), np.float32(model.ber_good))
    flips = rng.random(bits.size, dtype=np.float32) < p
    return bits ^ flips.view(np.uint8)


def erase_frames(frames: int, rate: float, rng: np.random.Generator) -> np.ndarray:
    """Which of ``frames`` frames arrive (True) when each is lost with probability ``rate``.

    Parameters
    ----------
    frames : int
        Number of frames.
    rate : float
        Loss probability of each frame, 0 to 1.
    rng : numpy.random.Generator
        The random source.

    Returns
    -------
    ndarray of bool
        True for each frame that arrives.

    Examples
    --------
    >>> import numpy as np
    >>> arrived = erase_frames(10000, 0.2, np.random.default_rng(0))
    >>> bool(abs(arrived.mean() - 0.8) < 4 * np.sqrt(0.16 / 10000))
    True
    """
    if not 0.0 <= rate <= 1.0:
        raise ValueError("erasure rate must lie in [0, 1]")
    return rng.random(frames) >= rate
