"""Bases that are the same on every machine: exact references and thread-count independence."""

import hashlib
import json
import math
import os
import subprocess
import sys

import numpy as np
import pytest

from codec import as_basis, basis_fingerprint


def _exact_gram_ints(n_points: int, degree: int) -> tuple[list[int], int]:
    """Unnormalised discrete Chebyshev (Gram) polynomial t_n(x), x = 0..N-1, and its norm.

    Source: Mukundan, Ong & Lee, "Image analysis by Tchebichef moments", IEEE Trans.
    Image Processing 10 (2001) 1357-1364 (formulas from memory; the test below checks
    the family's orthogonality and norms exactly):
        t_n(x) = n! sum_k (-1)^(n-k) C(N-1-k, n-k) C(n+k, n) C(x, k),
        rho(n, N) = sum_x t_n(x)^2 = (2n)! C(N+n, 2n+1).
    Every step is an exact integer.
    """
    n, size = degree, n_points
    coef = [(-1) ** (n - k) * math.comb(size - 1 - k, n - k) * math.comb(n + k, n)
            for k in range(n + 1)]
    values = []
    for x in range(size):
        total, binom_xk = 0, 1
        for k in range(min(n, x) + 1):
            total += coef[k] * binom_xk
            binom_xk = binom_xk * (x - k) // (k + 1)
        values.append(math.factorial(n) * total)
    return values, math.factorial(2 * n) * math.comb(size + n, 2 * n + 1)


def _exact_gram_row(n_points: int, degree: int) -> np.ndarray:
    """Orthonormal row t_n(x) / sqrt(rho) as float64.

    The square root is taken by math.isqrt on the value scaled by 2**240, so each float is
    within 2**-120 (relative) of the exact value before its final rounding.
    """
    values, rho = _exact_gram_ints(n_points, degree)
    assert sum(v * v for v in values) == rho
    return np.array([(1 if v > 0 else -1) * math.isqrt(v * v * (1 << 240) // rho) / 2.0**120
                     for v in values])


def test_exact_reference_is_an_orthogonal_polynomial_family():
    # The reference itself, in exact integers: rows pairwise orthogonal on the grid, squared
    # norms rho(n, N), and each t_n positive at the right end (positive leading coefficient,
    # all roots inside the grid).
    size = 21
    rows = [_exact_gram_ints(size, n) for n in range(size)]
    for i, (a, rho) in enumerate(rows):
        assert a[-1] > 0
        for j, (b, _) in enumerate(rows):
            assert sum(p * q for p, q in zip(a, b)) == (rho if i == j else 0)
    # And t_n is a polynomial of degree n: its (n+1)-th finite difference vanishes.
    for n in (0, 3, 7):
        diff = np.array(rows[n][0], dtype=object)
        for _ in range(n + 1):
            diff = diff[1:] - diff[:-1]
        assert not diff.any()


@pytest.mark.parametrize(("size", "degrees"), [
    (2, None), (7, None), (33, None), (64, None),
    (256, [0, 1, 15, 16, 17, 100, 128, 254, 255]),
    # 1024: the degrees around the switch between the two recurrences (sqrt(N) = 32),
    # the middle and the top; the exact rows take about a second each at the top.
    (1024, [0, 1, 2, 31, 32, 33, 511, 1022, 1023]),
])
def test_legendre_equals_exact_gram_polynomials(size, degrees):
    basis = as_basis("legendre", size).matrix
    for degree in range(size) if degrees is None else degrees:
        ref = _exact_gram_row(size, degree)
        # 1e-12 absolute on unit-norm rows: the agreement the issue asks for.
        assert np.abs(basis[degree] - ref).max() < 1e-12, degree


def test_legendre_is_orthonormal_at_the_longest_frame():
    # Orthonormality M M^T = I (any linear-algebra text) at the largest N a frame allows,
    # for rows at both ends, around the switch of recurrence (sqrt(4096) = 64) and the middle.
    m = as_basis("legendre", 4096).matrix
    rows = [0, 1, 2, 62, 63, 64, 65, 1000, 2047, 2048, 4094, 4095]
    assert np.abs(m[rows] @ m.T - np.eye(4096)[rows]).max() < 1e-11
    assert np.all(np.isfinite(m))


_BUILD_SCRIPT = """
import hashlib, json, sys
import codec
from codec import as_basis, basis_names
sizes, long = json.loads(sys.argv[1])
out = {}
for name in basis_names():
    if name == "klt":
        continue
    for n in sizes + (long if name in ("dct", "legendre") else []):
        try:
            m = as_basis(name, n).matrix
        except codec.InputError:
            continue
        out[f"{name}/{n}"] = hashlib.sha256(m.tobytes()).hexdigest()
print(json.dumps(out))
"""


def _build_in_subprocess(threads: int, sizes: list) -> dict[str, str]:
    env = dict(os.environ)
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        env[var] = str(threads)
    done = subprocess.run([sys.executable, "-c", _BUILD_SCRIPT, json.dumps(sizes)], env=env,
                          capture_output=True, text=True, check=True)
    return json.loads(done.stdout)


def test_every_builtin_basis_is_bit_identical_with_one_or_two_threads():
    # The raw bytes (not a rounded fingerprint) of every built-in basis, built in two fresh
    # processes whose BLAS runs on 1 and on 2 threads (N = 1024 only for the two bases whose
    # construction changes with N beyond a power-of-two cascade, to keep the test short).
    sizes = [[16, 100, 256], [1024]]
    one = _build_in_subprocess(1, sizes)
    two = _build_in_subprocess(2, sizes)
    assert {"dct/1024", "legendre/1024", "legendre/100", "haar/256", "db4/256",
            "sym8/256", "walsh/16"} <= set(one)
    assert one == two
    # And the same bytes as this process builds.
    for key, digest in one.items():
        name, n = key.split("/")
        assert hashlib.sha256(as_basis(name, int(n)).matrix.tobytes()).hexdigest() == digest


def test_fingerprint_ignores_rounding_and_sees_real_differences():
    m = as_basis("legendre", 64).matrix
    assert basis_fingerprint(m) == basis_fingerprint(m.copy())
    # A change of one float64 ulp in an entry far from a rounding boundary: same fingerprint.
    nudged = m.copy()
    nudged[3, 5] = np.nextafter(nudged[3, 5], 2.0)
    q = nudged[3, 5] * 2.0**32
    if abs(q - np.floor(q) - 0.5) > 1e-3:
        assert basis_fingerprint(nudged) == basis_fingerprint(m)
    # A difference of 1e-6 in one entry (far above 2**-32): another fingerprint.
    moved = m.copy()
    moved[40, 10] += 1e-6
    assert basis_fingerprint(moved) != basis_fingerprint(m)
    assert len(basis_fingerprint(m)) == 64
    assert len({basis_fingerprint(as_basis(name, 64).matrix)
                for name in ("dct", "legendre", "haar", "walsh")}) == 4
