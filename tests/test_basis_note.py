"""The stream note records the basis fingerprint; a machine that builds another basis refuses."""

import tomllib

import numpy as np
import pytest
import tomli_w

from codec import ProfileError, as_basis, basis_fingerprint
from codec._profile import load_stream_note
from codec.cli import main


@pytest.fixture
def legendre_stream(tmp_path):
    rng = np.random.default_rng(5)
    t = np.arange(1024)
    x = np.c_[np.sin(t / 40) + 0.05 * rng.normal(size=t.size), rng.normal(size=t.size)]
    src = tmp_path / "in.csv"
    np.savetxt(src, x, delimiter=",", header="a,b", comments="", fmt="%.6f")
    stream = tmp_path / "s.cwire"
    assert main(["encode", str(src), "-o", str(stream), "--basis", "legendre",
                 "--frame-length", "256"]) == 0
    return stream


def _qr_legendre(n: int) -> np.ndarray:
    # The construction coefwire used before: QR of the Legendre-Vandermonde matrix.  Its
    # high-degree rows come out of rounding error (they differ between BLAS kernels), so it
    # stands for "the basis another machine built".
    vander = np.polynomial.legendre.legvander(np.linspace(-1.0, 1.0, n), n - 1)
    q, r = np.linalg.qr(vander)
    return (q * np.sign(np.diag(r))).T


def test_note_records_the_fingerprint_of_the_basis_as_built(legendre_stream):
    note = tomllib.loads((legendre_stream.parent / "s.cwire.profile.toml").read_text())
    assert note["stream"]["basis_fingerprint"] == basis_fingerprint(
        as_basis("legendre", 256).matrix)
    out = legendre_stream.parent / "out.csv"
    assert main(["decode", str(legendre_stream), "-o", str(out)]) == 0


def test_stream_whose_basis_differs_is_refused(legendre_stream, tmp_path, capsys):
    other = _qr_legendre(256)
    # The premise: the other construction really is another matrix at N = 256 (the issue
    # measured up to 0.7 between machines; here against the exact Gram polynomials).
    assert np.abs(other - as_basis("legendre", 256).matrix).max() > 1e-6
    note_file = tmp_path / "s.cwire.profile.toml"
    data = tomllib.loads(note_file.read_text())
    data["stream"]["basis_fingerprint"] = basis_fingerprint(other)
    note_file.write_text(tomli_w.dumps(data))
    capsys.readouterr()

    out = tmp_path / "out.csv"
    assert main(["decode", str(legendre_stream), "-o", str(out)]) == 2
    err = capsys.readouterr().err
    assert "basis 'legendre' at N = 256" in err and "differs" in err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert not out.exists()

    assert main(["inspect", str(legendre_stream)]) == 2
    assert "basis 'legendre' at N = 256" in capsys.readouterr().err

    # receive reads the same note before it opens a socket.
    assert main(["receive", "--udp", "127.0.0.1:9", "-p", str(note_file), "-o", str(out)]) == 2
    assert "basis 'legendre' at N = 256" in capsys.readouterr().err
    assert not out.exists()

    with pytest.raises(ProfileError, match="basis 'legendre' at N = 256"):
        load_stream_note(note_file)
