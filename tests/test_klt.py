"""The trained (Karhunen-Loeve) basis: compaction, orthonormality, its file and its hash."""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
import scipy.signal
from checks import assert_meets_target

import codec
from codec._compare import energy_compaction
from codec.cli import main
from codec.transform.klt import KLT_CODE


def _ar1(rho: float, size: int, seed: int) -> np.ndarray:
    """Gaussian first-order Markov (AR(1)) source with unit variance."""
    rng = np.random.default_rng(seed)
    return scipy.signal.lfilter([np.sqrt(1 - rho**2)], [1, -rho], rng.normal(size=size))


def test_klt_matches_dct_compaction_on_ar1():
    # Source: Ahmed, Natarajan & Rao, "Discrete Cosine Transform", IEEE Trans. Computers
    # C-23 (1974): on a first-order Markov source with rho near 1 the DCT's variance
    # compaction is close to the KLT's.  We fit the KLT on one AR(1) rho = 0.95 series and
    # measure both on another.
    n = 16
    trained = codec.train_klt(_ar1(0.95, n * 8000, 1), n)
    held = _ar1(0.95, n * 8000, 2).reshape(-1, n)
    klt = energy_compaction(held, trained.basis(), adaptive=False)
    dct = energy_compaction(held, codec.as_basis("dct", n), adaptive=False)
    assert np.abs(klt - dct).max() < 0.005
    # and both approach the eigenvalue bound of the covariance rho**|i-j|
    # (the KLT of the true covariance; numpy's eigvalsh as the reference)
    cov = 0.95 ** np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    bound = np.cumsum(np.sort(np.linalg.eigvalsh(cov))[::-1]) / n
    assert np.abs(klt - bound).max() < 0.01
    assert klt[0] > 0.7  # most energy in one term for rho = 0.95 (bound: 0.78)


def test_klt_is_orthonormal_and_ordered_by_energy():
    x = np.cumsum(np.random.default_rng(4).normal(size=(3000, 3)), axis=0)
    t = codec.train_klt(x, 32)
    m = t.matrix
    np.testing.assert_allclose(m @ m.T, np.eye(32), atol=1e-12)
    np.testing.assert_allclose(m[0], np.full(32, 32**-0.5), atol=1e-12)  # constant row first
    assert (np.diff(t.energy[1:]) <= 1e-12).all()  # the rest by falling energy
    assert t.note.frames_used == 3 * (3000 // 32)
    assert t.basis().code == KLT_CODE == 31


def test_too_little_history_is_refused():
    with pytest.raises(codec.InputError, match="needs at least 64 frames"):
        codec.train_klt(np.random.default_rng(0).normal(size=(64 * 20, 2)), 64)


def _trained_profile(tmp_path, x, n=32):
    t = codec.train_klt(x, n, ["a", "b"], input_name="hist.csv")
    path = tmp_path / "basis.cwbasis.npz"
    codec.save_trained_basis(t, path)
    return t, path, codec.Profile(frame_length=n, basis="klt", basis_file=str(path),
                                  basis_sha256=t.note.sha256, fidelity=0.99)


def test_file_round_trip_and_hash(tmp_path):
    x = np.cumsum(np.random.default_rng(8).normal(size=(4000, 2)), axis=0)
    t, path, _ = _trained_profile(tmp_path, x)
    back = codec.load_trained_basis(path, t.note.sha256)
    np.testing.assert_array_equal(back.matrix, t.matrix)
    assert back.note == t.note
    # Source: hashlib's SHA-256 of the stored little-endian float64 bytes.
    with np.load(path, allow_pickle=False) as z:
        raw = z["matrix"].astype("<f8").tobytes()
    assert back.note.sha256 == hashlib.sha256(raw).hexdigest()
    assert back.note.input_name == "hist.csv" and back.note.channels == ("a", "b")


def test_encode_decode_with_trained_basis_and_changed_hash_refused(tmp_path):
    x = np.cumsum(np.random.default_rng(9).normal(size=(4000, 2)), axis=0)
    t, path, prof = _trained_profile(tmp_path, x)
    enc = codec.encode(x, prof)
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert_meets_target(x, dec.samples, enc.profile)  # budgets recomputed (verify.py)
    np.testing.assert_array_equal(dec.samples, enc.reconstruction)
    # a profile expecting another hash is refused on decode
    other = enc.profile.model_copy(update={"basis_sha256": "0" * 64})
    with pytest.raises(codec.ProfileError, match="SHA-256"):
        codec.decode(enc.data, other)
    # a basis file replaced by another training (same path, same profile) is refused too
    t2 = codec.train_klt(x[::-1].copy(), 32, ["a", "b"])
    codec.save_trained_basis(t2, path)
    with pytest.raises(codec.ProfileError, match="the profile expects"):
        codec.decode(enc.data, enc.profile)
    # and a matrix altered inside the file (note left as it was) is refused
    with np.load(path, allow_pickle=False) as z:
        parts = {k: z[k] for k in z.files}
    parts["matrix"] = parts["matrix"].copy()
    parts["matrix"][0, 0] += 1e-6
    np.savez(path, **parts)
    with pytest.raises(codec.ProfileError, match="altered"):
        codec.decode(enc.data, enc.profile)


def test_profile_needs_file_and_hash(tmp_path):
    p = tmp_path / "p.toml"
    p.write_text('basis = "klt"\nframe_length = 32\n', encoding="utf-8")
    with pytest.raises(codec.ProfileError, match="basis_file and basis_sha256"):
        codec.load_profile(p)
    with pytest.raises(codec.InputError, match="trained"):
        codec.as_basis("klt", 32)


def test_profile_relative_basis_file_and_id_ignore_path(tmp_path):
    x = np.cumsum(np.random.default_rng(2).normal(size=(4000, 2)), axis=0)
    t, path, prof = _trained_profile(tmp_path, x)
    p = tmp_path / "p.toml"
    p.write_text(f'basis = "klt"\nframe_length = 32\nbasis_file = "basis.cwbasis.npz"\n'
                 f'basis_sha256 = "{t.note.sha256}"\nfidelity = 0.99\n', encoding="utf-8")
    loaded = codec.load_profile(p)
    assert loaded.basis_file == str(path)
    moved = loaded.model_copy(update={"basis_file": "/elsewhere/basis.cwbasis.npz"})
    assert codec.profile_id(moved) == codec.profile_id(loaded)
    assert codec.profile_id(loaded) != codec.profile_id(
        loaded.model_copy(update={"basis_sha256": "1" * 64}))
    # a profile without a trained basis keeps the identifier it had before the new fields:
    # the first two bytes of SHA-256 (hashlib) of the canonical JSON without them
    plain = codec.Profile(frame_length=32, basis="haar")
    canon = plain.model_dump(exclude={"description", "basis_file", "basis_sha256",
                                      "layout_version", "multi_channel_frames",
                                      "windows_per_frame", "fidelity_scope"})
    blob = json.dumps(canon, sort_keys=True, separators=(",", ":")).encode()
    assert codec.profile_id(plain) == int.from_bytes(hashlib.sha256(blob).digest()[:2], "big")


def test_train_command_writes_a_usable_basis(tmp_path, capsys):
    x = np.cumsum(np.random.default_rng(6).normal(size=(3000, 3)), axis=0)
    csv = tmp_path / "hist.csv"
    with open(csv, "w", encoding="utf-8") as fh:
        fh.write("a,b,c\n")
        np.savetxt(fh, x, delimiter=",")
    out = tmp_path / "b.cwbasis.npz"
    assert main(["train", str(csv), "-o", str(out), "--frame-length", "16",
                 "--channels", "a,c"]) == 0
    text = capsys.readouterr().out
    t = codec.load_trained_basis(out)
    assert t.note.sha256 in text and t.note.channels == ("a", "c")
    assert t.note.frames_used == 2 * (3000 // 16)
    assert main(["train", str(csv), "-o", str(tmp_path / "c.cwbasis.npz"), "--channels", "zz"]) == 2
    assert main(["train", str(csv), "-o", str(tmp_path / "d.cwbasis.npz"),
                 "--frame-length", "256"]) == 2  # 33 frames < 256
    assert not (tmp_path / "d.cwbasis.npz").exists()
