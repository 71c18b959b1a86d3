"""UDP loopback: send and receive move a demo stream with no loss, in bounded time.

Traffic goes to 127.0.0.1 only; every loop is bounded by a duration and an idle timeout.
"""

from __future__ import annotations

import contextlib
import io
import socket
import threading

import numpy as np
import pytest
from streams import real_stream

import codec
from codec.cli import main
from link_sim._udp import parse_endpoint, receive_frames, send_frames, split_frames_of


def test_loopback_moves_a_stream_without_loss():
    _, enc = real_stream(600, 3)
    ref = codec.decode(enc.data, enc.profile, samples=600)
    dec = codec.StreamDecoder(enc.profile, samples=600)
    blocks: list = []
    port: list[int] = []
    bound = threading.Event()

    def ready(p):
        port.append(p)
        bound.set()

    result: dict = {}
    rx = threading.Thread(target=lambda: result.update(receive_frames(
        dec, "127.0.0.1", 0, blocks.append, duration_s=10.0, idle_s=3.0, ready=ready)))
    rx.start()
    assert bound.wait(5.0)
    stats = send_frames(split_frames_of(enc.data), "127.0.0.1", port[0], rate_bps=2_000_000)
    rx.join(15.0)
    assert not rx.is_alive()
    vals = np.concatenate([b.samples for b in blocks])
    assert np.array_equal(vals, ref.samples)
    assert result["samples_lost"] == 0 and result["datagrams"] == stats.frames
    assert result["seconds"] < 10.0  # stopped at the stream's known end, not the timeout


def test_sender_paces_frames_at_the_link_rate():
    # Fake clock: frame k must leave at bits_before_k / R seconds (no real sleeping).
    now = [0.0]
    departures = []

    def clock():
        return now[0]

    def sleep(s):
        now[0] += s

    frames = [b"\x00" * 100, b"\x00" * 50, b"\x00" * 25]
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as sink:
        sink.bind(("127.0.0.1", 0))
        real_sendto = socket.socket.sendto

        def record(self, data, addr):
            departures.append(now[0])
            return real_sendto(self, data, addr)

        socket.socket.sendto = record
        try:
            send_frames(frames, "127.0.0.1", sink.getsockname()[1], rate_bps=8000,
                        clock=clock, sleep=sleep)
        finally:
            socket.socket.sendto = real_sendto
    assert departures == pytest.approx([0.0, 0.1, 0.15])  # 800 bits, then 400, at 8 kbit/s


def test_endpoint_parsing():
    assert parse_endpoint("127.0.0.1:47000") == ("127.0.0.1", 47000)
    assert parse_endpoint("[::1]:9") == ("::1", 9)
    for bad in ("localhost", "127.0.0.1:0", "127.0.0.1:70000", ":5"):
        with pytest.raises(codec.InputError):
            parse_endpoint(bad)


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_cli_send_and_receive(tmp_path):
    x, _ = real_stream(300, 2)
    src = tmp_path / "in.csv"
    np.savetxt(src, x, delimiter=",", header="a,b", comments="")
    stream = tmp_path / "s.bin"
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["encode", str(src), "-o", str(stream)]) == 0
    port = _free_port()
    out = tmp_path / "rx.csv"
    rc: list[int] = []
    rx = threading.Thread(target=lambda: rc.append(main([
        "receive", "--udp", f"127.0.0.1:{port}", "-p", f"{stream}.profile.toml", "-o", str(out),
        "--duration", "10", "--idle", "3"])))
    with contextlib.redirect_stdout(io.StringIO()):
        rx.start()
        threading.Event().wait(0.5)  # the receiver binds first (bounded wait)
        assert main(["send", str(stream), "--udp", f"127.0.0.1:{port}"]) == 0
        rx.join(15.0)
    assert rc == [0]
    got = np.loadtxt(out, delimiter=",", skiprows=1)
    ref = codec.decode(stream.read_bytes(), codec.load_profile(f"{stream}.profile.toml")
                       .bind(["a", "b"]), samples=300)
    assert np.allclose(got, ref.samples, rtol=0, atol=0)
