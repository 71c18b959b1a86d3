"""Bits per sample of coefwire against the Shannon bound and two zstd baselines.

For zero-mean Gaussian AR(1) sources (rho in 0.9, 0.95, 0.99; 10**6 samples,
seeded) and energy fidelity F in 0.9, 0.95, 0.99, 0.999 (reference ``total``,
N = 256, DCT) this prints, per row:

* coefwire's bits/sample, every bit of the stream counted (sync markers,
  headers, side information, padding, CRCs), and how many frames meet the
  target, checked on the *decoded* samples;
* R(D), the rate-distortion function of the Gaussian AR(1) process at
  D = (1 - F) sigma**2, by reverse water-filling over its power spectrum
  (the N -> infinity bound, column ``R_inf``);
* R_N(D), the bound for blocks of N samples coded one at a time, as every
  frame is: reverse water-filling over the eigenvalues of the N x N Toeplitz
  covariance sigma**2 rho**|i-j| (column ``R_N``).  It is never below R(D)
  and tends to it as N grows (Grenander-Szego); the gap is taken to it, since
  no coder of independent N-sample frames can go below it;
* two baselines at the same error energy as coefwire's decoded output:
  samples uniformly quantized (step sqrt(12 D)) stored as the smallest
  integer type then zstd level 19, and the same codes first-differenced then
  zstd level 19;
* the gap to R_N(D) and the saving against the better baseline.

Run: ``python tools/bench_rate.py [--samples N] [--seed S] [--layout 3|4|5|6|7] [--scope S]``
(layout 4, the default here, lets each frame use dependent quantization).

References
----------
T. M. Cover and J. A. Thomas, *Elements of Information Theory*, 2nd ed.,
Wiley 2006, ch. 10 (rate distortion theory; reverse water-filling for
Gaussian sources, Theorem 10.3.3, and its spectral form for stationary
Gaussian processes).  U. Grenander and G. Szego, *Toeplitz Forms and Their
Applications*, 1958 (eigenvalues of Toeplitz covariances and the spectrum).
"""

from __future__ import annotations

import argparse
import math
import sys
import time

import numpy as np
import scipy.linalg
import scipy.signal
import zstandard

import codec


def ar1_spectrum(rho: float, sigma2: float, omega: np.ndarray) -> np.ndarray:
    """Power spectral density of a stationary AR(1) process of variance ``sigma2``."""
    return sigma2 * (1.0 - rho**2) / (1.0 - 2.0 * rho * np.cos(omega) + rho**2)


def rate_distortion_ar1(rho: float, sigma2: float, d: float, grid: int = 1 << 16) -> float:
    """R(D) in bits/sample of a Gaussian AR(1) process by reverse water-filling.

    Cover & Thomas ch. 10: choose the water level theta with
    D = (1/2pi) int min(theta, S(w)) dw, then
    R = (1/2pi) int max(0, 1/2 log2(S(w) / theta)) dw.
    The integrals are midpoint sums over [0, pi] (S is even).
    """
    omega = (np.arange(grid) + 0.5) * (math.pi / grid)
    # the midpoint sums are reverse water-filling over the spectrum's samples
    return reverse_water_filling(ar1_spectrum(rho, sigma2, omega), d)


def reverse_water_filling(variances, d: float) -> float:
    """Bits per component of independent Gaussian components at mean distortion ``d``.

    Cover & Thomas, Theorem 10.3.3: with water level theta chosen so that
    mean(min(theta, var_i)) = d, R = mean(max(0, 1/2 log2(var_i / theta))).
    Components whose variance is below theta get no bits.
    """
    var = np.asarray(variances, dtype=np.float64)
    if d >= var.mean():
        return 0.0
    lo, hi = 0.0, float(var.max())
    for _ in range(200):  # bisection on the water level
        theta = 0.5 * (lo + hi)
        if np.minimum(theta, var).mean() > d:
            hi = theta
        else:
            lo = theta
    theta = 0.5 * (lo + hi)
    return float(np.maximum(0.0, 0.5 * np.log2(var / theta)).mean())


def ar1_covariance_eigenvalues(rho: float, sigma2: float, n: int) -> np.ndarray:
    """Eigenvalues of the N x N covariance sigma2 * rho**|i-j| of a stationary AR(1) process."""
    cov = scipy.linalg.toeplitz(sigma2 * rho ** np.arange(n))
    return np.clip(scipy.linalg.eigvalsh(cov), 0.0, None)


def rate_distortion_ar1_block(rho: float, sigma2: float, d: float, n: int) -> float:
    """R_N(D) in bits/sample for blocks of ``n`` AR(1) samples coded independently.

    The block is a Gaussian vector; in the eigenbasis of its covariance (the
    KLT) its components are independent, so R_N(D) is reverse water-filling over
    the eigenvalues (Cover & Thomas, Theorem 10.3.3).  R_N(D) >= R(D) and tends
    to it as ``n`` grows.
    """
    return reverse_water_filling(ar1_covariance_eigenvalues(rho, sigma2, n), d)


def ar1_source(rho: float, samples: int, seed: int) -> np.ndarray:
    """Unit-variance Gaussian AR(1) samples, started in the stationary state."""
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(samples) * math.sqrt(1.0 - rho**2)
    e[0] = rng.standard_normal()
    return scipy.signal.lfilter([1.0], [1.0, -rho], e)


def smallest_int(codes: np.ndarray) -> np.ndarray:
    """The codes in the narrowest signed integer type that holds them (what zstd is given)."""
    for dt in (np.int8, np.int16, np.int32, np.int64):
        info = np.iinfo(dt)
        if codes.min() >= info.min and codes.max() <= info.max:
            return codes.astype(dt)
    raise AssertionError("codes exceed int64")


def zstd_baselines(x: np.ndarray, mse: float) -> tuple[float, float, float]:
    """Bits/sample of (quantized + zstd-19, differenced + zstd-19) and their measured MSE."""
    step = math.sqrt(12.0 * mse)
    codes = np.rint(x / step).astype(np.int64)
    zc = zstandard.ZstdCompressor(level=19)
    plain = len(zc.compress(smallest_int(codes).tobytes())) * 8 / x.size
    diff = np.diff(codes, prepend=0)
    dbits = len(zc.compress(smallest_int(diff).tobytes())) * 8 / x.size
    return plain, dbits, float(np.mean((x - codes * step) ** 2))


def decoded_frames_met(x: np.ndarray, enc, dec) -> tuple[int, int]:
    """Budget blocks whose error energy on the *decoded* samples is within budget.

    A block is a window (window scope) or the windows of one frame (frame scope).
    """
    n = enc.profile.frame_length
    windows = -(-x.size // n)
    pad = windows * n - x.size
    e = np.pad(x - dec.samples[:, 0], (0, pad)).reshape(windows, n)
    err = np.einsum("ij,ij->i", e, e)
    f = enc.frames
    met = np.bincount(f["block"], weights=err, minlength=f["block_budget"].size) \
        <= f["block_budget"]
    return int(met.sum()), int(met.size)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--samples", type=int, default=1_000_000)
    ap.add_argument("--seed", type=int, default=20261201)
    ap.add_argument("--frame-length", type=int, default=256)
    ap.add_argument("--rho", type=float, nargs="*", default=[0.9, 0.95, 0.99])
    ap.add_argument("--fidelity", type=float, nargs="*", default=[0.9, 0.95, 0.99, 0.999])
    ap.add_argument("--layout", type=int, choices=(3, 4, 5, 6, 7), default=4,
                    help="frame layout (7: the default profile's; 6: without its count-free "
                    "flag; 5: without the basis switch either; 3: without prediction either; "
                    "4: 3 with dependent quantization)")
    ap.add_argument("--scope", choices=("window", "frame"), default="frame",
                    help="fidelity scope (default frame, the profile default)")
    args = ap.parse_args(argv)
    print(f"AR(1), {args.samples} samples, N={args.frame_length}, DCT, reference total, "
          f"layout {args.layout}, {args.scope} scope; bits/sample with every stream bit counted")
    print(f"R_N: bound for independent blocks of N={args.frame_length} samples (eigenvalues of "
          "the Toeplitz covariance); R_inf: N -> infinity; gap = coefwire - R_N")
    print(f"{'rho':>5} {'F':>6} {'coefwire':>9} {'header':>7} {'R_N':>6} {'R_inf':>6} "
          f"{'gap':>6} {'zstd':>6} {'dzstd':>6} {'saving':>7} {'frames met':>12} {'enc s':>6}")
    ok = True
    for i, rho in enumerate(args.rho):
        x = ar1_source(rho, args.samples, args.seed + i)
        for f in args.fidelity:
            prof = codec.Profile(frame_length=args.frame_length, basis="dct", fidelity=f,
                                 reference="total", layout_version=args.layout,
                                 fidelity_scope=args.scope)
            t0 = time.perf_counter()
            enc = codec.encode(x[:, None], prof)
            dt = time.perf_counter() - t0
            dec = codec.decode(enc.data, enc.profile, samples=x.size)
            bps = len(enc.data) * 8 / x.size
            met, total = decoded_frames_met(x, enc, dec)
            mse = float(np.mean((x - dec.samples[:, 0]) ** 2))
            rd = rate_distortion_ar1(rho, 1.0, (1.0 - f) * 1.0)
            rd_n = rate_distortion_ar1_block(rho, 1.0, (1.0 - f) * 1.0, args.frame_length)
            plain, diff, _ = zstd_baselines(x, mse)
            best = min(plain, diff)
            saving = 1.0 - bps / best
            ok &= met == total
            print(f"{rho:>5} {f:>6} {bps:>9.3f} {enc.report['header_bits_per_sample']:>7.3f} "
                  f"{rd_n:>6.3f} {rd:>6.3f} {bps - rd_n:>6.3f} {plain:>6.3f} {diff:>6.3f} "
                  f"{saving:>7.1%} "
                  f"{met:>6}/{total:<5} {dt:>6.2f}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
