"""One status vocabulary: the link simulator's receiver and the codec's decoder share codes."""

import numpy as np

import codec
from codec import _status
from link_sim import _receiver, conceal


def test_receiver_and_decoder_use_the_same_codes_and_names():
    # One place defines them (codec._status); the receiver's names are the same objects.
    assert (_receiver.LOST, _receiver.DELIVERED, _receiver.CONCEALED) == (
        codec.LOST, codec.DELIVERED, codec.CONCEALED)
    assert codec.STATUS_NAMES == {0: "lost", 1: "delivered", 2: "gap", 3: "concealed"}
    assert codec.STATUS_CODES == {v: k for k, v in codec.STATUS_NAMES.items()}
    assert max(codec.STATUS_NAMES) < codec.FIRST_FREE_STATUS
    # the stream modules import the codes from codec._status; none re-exports them
    from codec.stream import live, search

    assert live.STATUS_NAMES is _status.STATUS_NAMES
    assert not set(_status.__all__) & set(search.__all__)


def test_concealed_samples_are_never_called_gap():
    # Before, the receiver's "concealed" was code 2, the decoder's "gap".
    delivered = np.array([[True], [False], [True]])
    out, status = conceal(np.array([[1.0], [np.nan], [3.0]]), delivered, "linear")
    assert out[1, 0] == 2.0  # straight line between the neighbours (np.interp)
    assert [codec.STATUS_NAMES[int(s)] for s in status[:, 0]] == [
        "delivered", "concealed", "delivered"]
    assert status.dtype == np.uint8


def test_decoder_status_names_are_its_json_keys():
    # The decoder's per-sample counts use the same names: samples_<name>.
    x = np.random.default_rng(4).normal(size=(256, 1))
    x[10:20, 0] = np.nan
    enc = codec.encode(x, codec.Profile(frame_length=32), gaps="mark")
    dec = codec.decode(enc.data, enc.profile, samples=x.shape[0])
    for code, name in codec.STATUS_NAMES.items():
        assert dec.counts[f"samples_{name}"] == int((dec.status == code).sum())
    assert dec.counts["samples_gap"] == 10
