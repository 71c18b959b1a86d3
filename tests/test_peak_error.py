"""Peak-error mode: no decoded sample differs from the input by more than E."""

import numpy as np
import pytest
from checks import assert_meets_target

import codec
from codec import ChannelSpec, InputError, Profile
from codec.cli import main


def _signals():
    rng = np.random.default_rng(7)
    n = 2000
    t = np.arange(n)
    random = rng.standard_normal(n).cumsum()
    spiky = 0.01 * rng.standard_normal(n)
    spiky[rng.choice(n, 12, replace=False)] = rng.choice([-50.0, 50.0], 12)  # isolated spikes
    step = np.where(t < 777, -3.0, 40.0) + 0.001 * rng.standard_normal(n)  # a step mid-frame
    square = np.sign(np.sin(t / 9.0)) * 5.0  # many steps
    return {"random": random, "spiky": spiky, "step": step, "square": square}


def _profile(limit, fidelity=0.99, **kw):
    return Profile(fidelity=fidelity, channels=(ChannelSpec(name="x", max_error=limit),), **kw)


# The guarantee is the definition of the mode (no source needed): max |x - x_hat| <= E,
# checked on the samples the decoder returns from the bytes.
@pytest.mark.parametrize("name", ["random", "spiky", "step", "square"])
@pytest.mark.parametrize("limit", [1.0, 0.05, 1e-4])
@pytest.mark.parametrize("fidelity", [0.0, 0.99])
def test_no_decoded_sample_exceeds_the_limit(name, limit, fidelity):
    x = _signals()[name][:, None]
    enc = codec.encode(x, _profile(limit, fidelity))
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    assert np.abs(dec.samples - x).max() <= limit
    assert_meets_target(x, dec.samples, enc.profile)  # and every energy budget (verify.py)


@pytest.mark.parametrize("kw", [dict(multi_channel_frames=True), dict(layout_version=1),
                                dict(basis="walsh", frame_length=16), dict(layout_version=4)])
def test_per_channel_limits_in_all_layouts(kw):
    s = _signals()
    x = np.stack([s["spiky"], s["step"]], axis=1)
    chans = (ChannelSpec(name="a", max_error=0.02), ChannelSpec(name="b", max_error=0.5))
    enc = codec.encode(x, Profile(channels=chans, **kw))
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    err = np.abs(dec.samples - x).max(axis=0)
    assert err[0] <= 0.02 and err[1] <= 0.5


def test_limit_costs_bits_only_where_needed():
    x = _signals()["random"][:, None]
    loose = codec.encode(x, _profile(100.0))
    plain = codec.encode(x, Profile(fidelity=0.99, channels=(ChannelSpec(name="x"),)))
    assert loose.data == plain.data  # a limit that already holds changes nothing


def test_impossible_limit_is_a_clear_error():
    x = (_signals()["random"] * 1e12)[:, None]
    with pytest.raises(InputError, match="peak-error limit"):
        codec.encode(x, _profile(1e-300))


def test_cli_max_error(tmp_path, capsys):
    x = _signals()["step"]
    src = tmp_path / "in.csv"
    np.savetxt(src, x[:, None], delimiter=",", header="v", comments="")
    out = tmp_path / "s.bin"
    assert main(["encode", str(src), "-o", str(out), "--max-error", "0.01"]) == 0
    back = tmp_path / "back.csv"
    assert main(["decode", str(out), "-o", str(back)]) == 0
    y = np.loadtxt(back, delimiter=",", skiprows=1)
    assert np.abs(y - x).max() <= 0.01 + 1e-12  # CSV text round trip adds < 1e-12
    assert main(["roundtrip", str(src), "--max-error", "0"]) == 2
    assert "--max-error must be a positive number" in capsys.readouterr().err
