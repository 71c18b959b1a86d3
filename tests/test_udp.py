"""UDP loopback: send and receive move a demo stream with no loss, in bounded time.

Traffic goes to 127.0.0.1 only; every loop is bounded by a duration and an idle timeout.
"""

from __future__ import annotations

import contextlib
import io
import queue
import socket
import subprocess
import sys
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
        dec, "127.0.0.1", 0, blocks.append, duration_s=60.0, idle_s=30.0, ready=ready)))
    rx.start()
    assert bound.wait(120.0)  # readiness: the socket is bound (generous under load)
    stats = send_frames(split_frames_of(enc.data), "127.0.0.1", port[0], rate_bps=2_000_000)
    rx.join(120.0)
    assert not rx.is_alive()
    vals = np.concatenate([b.samples for b in blocks])
    assert np.array_equal(vals, ref.samples)
    assert result["samples_lost"] == 0 and result["datagrams"] == stats.frames
    # it stopped at the stream's known end, not at the duration or idle limits
    assert dec.complete() and result["seconds"] < 30.0


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


def test_cli_send_and_receive(tmp_path):
    # The real commands: 'receive' in its own process listens on port 0 and says which
    # port it got; the test waits for that line (readiness, not a fixed sleep), then sends.
    x, _ = real_stream(300, 2)
    src = tmp_path / "in.csv"
    np.savetxt(src, x, delimiter=",", header="a,b", comments="")
    stream = tmp_path / "s.bin"
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["encode", str(src), "-o", str(stream)]) == 0
    out = tmp_path / "rx.csv"
    argv = [sys.executable, "-m", "codec.cli", "receive", "--udp", "127.0.0.1:0", "-p",
            f"{stream}.profile.toml", "-o", str(out), "--duration", "60", "--idle", "30"]
    with subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                          text=True) as proc:
        lines: queue.Queue = queue.Queue()
        reader = threading.Thread(target=lambda: [lines.put(ln) for ln in proc.stdout])
        reader.start()
        try:
            first = lines.get(timeout=120)  # generous: a loaded machine imports numpy slowly
            assert first.startswith("listening on 127.0.0.1:"), first
            port = int(first.rsplit(":", 1)[1])
            assert port > 0
            with contextlib.redirect_stdout(io.StringIO()):
                assert main(["send", str(stream), "--udp", f"127.0.0.1:{port}"]) == 0
            assert proc.wait(timeout=120) == 0  # it stops at the stream's known end
        finally:
            if proc.poll() is None:
                proc.kill()
            proc.wait()
            reader.join()
    got = np.loadtxt(out, delimiter=",", skiprows=1)
    ref = codec.decode(stream.read_bytes(), codec.load_profile(f"{stream}.profile.toml")
                       .bind(["a", "b"]), samples=300)
    assert np.array_equal(got, ref.samples)


def test_receive_refuses_a_port_it_cannot_bind(tmp_path, capsys):
    # another socket holds the port: one sentence, exit 2 (the receiver binds, never guesses)
    x, _ = real_stream(64, 1)
    np.save(tmp_path / "x.npy", x)
    stream = tmp_path / "s.bin"
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["encode", str(tmp_path / "x.npy"), "-o", str(stream)]) == 0
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as held:
        held.bind(("127.0.0.1", 0))
        port = held.getsockname()[1]
        assert main(["receive", "--udp", f"127.0.0.1:{port}", "-p", f"{stream}.profile.toml",
                     "-o", str(tmp_path / "rx.csv"), "--duration", "5"]) == 2
    assert "cannot listen on" in capsys.readouterr().err
    assert not (tmp_path / "rx.csv").exists()
