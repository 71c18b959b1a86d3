"""Batch mode: a zstd pack of frames with a dictionary from zstd's own trainer."""

import numpy as np
import pytest
import scipy.signal
import zstandard

import codec
from codec import FrameError, InputError, Profile
from codec.stream.packs import make_pack, open_pack, pack_report, train_dictionary


def _stream(seed, samples=4000, profile=None):
    rng = np.random.default_rng(seed)
    x = scipy.signal.lfilter([1.0], [1.0, -0.95], rng.standard_normal((samples, 2)), axis=0)
    return codec.encode(x, profile or Profile()), x


def test_pack_round_trip_with_trained_dictionary():
    train = [_stream(s)[0].data for s in range(3)]
    d = train_dictionary(train)
    # the dictionary is a real zstd dictionary (zstandard reads its id back)
    assert zstandard.ZstdCompressionDict(d).dict_id() != 0
    enc, x = _stream(99)
    pack = make_pack(enc.data, d)
    assert open_pack(pack, d) == enc.data
    dec = codec.decode(open_pack(pack, d), enc.profile, samples=x.shape[0])
    assert np.array_equal(dec.samples, enc.reconstruction)


def test_report_is_measured_not_assumed():
    train = [_stream(s)[0].data for s in range(3)]
    d = train_dictionary(train)
    enc, x = _stream(42)
    pack = make_pack(enc.data, d)
    r = pack_report(enc.data, pack, x.size, d)
    assert r["bits_saved"] == 8 * (len(enc.data) - len(pack))
    assert (r["bits_saved"] > 0) == r["verdict"].startswith("the pack saves bits")


def test_pack_of_incompressible_bytes_says_it_saves_nothing():
    # random bytes cannot be compressed (counting argument; common knowledge)
    junk = np.random.default_rng(0).bytes(5000)
    pack = make_pack(junk)
    r = pack_report(junk, pack, 1000, None)
    assert r["bits_saved"] <= 0 and "saves nothing" in r["verdict"]


def test_expansion_cap_refuses_a_bomb():
    bomb = make_pack(bytes(10_000_000))
    with pytest.raises(FrameError, match="cap"):
        open_pack(bomb, None, max_output_size=1_000_000)


def test_wrong_or_corrupt_pack_is_refused():
    with pytest.raises(FrameError):
        open_pack(b"not a pack at all")
    train = [_stream(s)[0].data for s in range(3)]
    d = train_dictionary(train)
    pack = make_pack(_stream(5)[0].data, d)
    with pytest.raises(FrameError):
        open_pack(pack, None)


def test_too_few_training_frames():
    enc, _ = _stream(1, samples=64)
    with pytest.raises(InputError, match="sample frames"):
        train_dictionary([enc.data])
