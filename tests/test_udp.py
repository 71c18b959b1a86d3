"""UDP loopback: send and receive move a demo stream with no loss, in bounded time.

Traffic goes to 127.0.0.1 only; every loop is bounded by a duration and an idle timeout.
"""

from __future__ import annotations

import contextlib
import io
import json
import queue
import signal
import socket
import subprocess
import sys
import threading
import time

import numpy as np
import pytest
from streams import real_stream, receive_over_loopback

import codec
from codec._profile import StreamNote, save_stream_note
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
    rx = threading.Thread(target=lambda: result.update(got=receive_frames(
        dec, "127.0.0.1", 0, blocks.append, duration_s=60.0, idle_s=30.0, ready=ready)))
    rx.start()
    assert bound.wait(120.0)  # readiness: the socket is bound (generous under load)
    stats = send_frames(split_frames_of(enc.data), "127.0.0.1", port[0], rate_bps=2_000_000)
    rx.join(120.0)
    assert not rx.is_alive()
    vals = np.concatenate([b.samples for b in blocks])
    assert np.array_equal(vals, ref.samples)
    got = result["got"]
    assert got.counts.samples_lost == 0 and got.datagrams == stats.frames
    # it stopped at the stream's known end, not at the duration or idle limits
    assert dec.complete() and got.seconds < 30.0


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
    receive_over_loopback(stream, out)
    got = np.loadtxt(out, delimiter=",", skiprows=1)
    ref = codec.decode(stream.read_bytes(), codec.load_profile(f"{stream}.profile.toml")
                       .bind(["a", "b"]), samples=300)
    assert np.array_equal(got, ref.samples)


class _SlowFirstDecode:
    """A StreamDecoder whose first datagram takes long to decode: it waits until the whole
    burst sits in the socket, then stays busy for three idle periods (a stand-in for a slow
    decode, e.g. a trained basis loaded on first use)."""

    def __init__(self, decoder, sent: threading.Event, busy_s: float):
        self._dec, self._sent, self._busy = decoder, sent, busy_s
        self.first = True

    def feed(self, data):
        if self.first:
            self.first = False
            assert self._sent.wait(10.0)
            threading.Event().wait(self._busy)  # busy decoding, not idle
        return self._dec.feed(data)

    def __getattr__(self, name):
        return getattr(self._dec, name)


def test_a_burst_waiting_in_the_socket_is_read_entirely():
    # 36 datagrams sent at once while the first is being decoded: the idle timer counts
    # time spent waiting with no datagram, so decoding time must not end the run early.
    _, enc = real_stream(600, 3)
    frames = split_frames_of(enc.data)[:36]
    sent = threading.Event()
    dec = _SlowFirstDecode(codec.StreamDecoder(enc.profile), sent, busy_s=0.6)
    port: list[int] = []
    bound = threading.Event()
    result: dict = {}

    def ready(p):
        port.append(p)
        bound.set()

    rx = threading.Thread(target=lambda: result.update(got=receive_frames(
        dec, "127.0.0.1", 0, lambda b: None, duration_s=30.0, idle_s=0.2, ready=ready)))
    rx.start()
    assert bound.wait(10.0)
    send_frames(frames, "127.0.0.1", port[0])
    sent.set()
    rx.join(40.0)
    assert not rx.is_alive()
    got = result["got"]
    assert got.datagrams == 36 and got.counts.frames_ok == 36
    assert got.stopped == "idle"


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_a_signal_leaves_the_samples_received_and_a_report(tmp_path, sig):
    # receive runs as its own process on port 0 and says which port it bound; it gets 90
    # of 114 frames (the end, from the stream note, is then 24 frames away), writes samples
    # while it runs, and on the signal finishes the output and the JSON report.
    _, enc = real_stream(600, 3, n=16)
    frames = split_frames_of(enc.data)
    assert len(frames) == 114  # 38 windows x 3 channels, one frame each
    note = tmp_path / "s.cwire.profile.toml"
    save_stream_note(enc.profile, StreamNote(samples=600), note)
    out, report = tmp_path / "rx.csv", tmp_path / "rx.json"
    proc = subprocess.Popen(
        [sys.executable, "-m", "codec.cli", "receive", "--udp", "127.0.0.1:0", "-p", str(note),
         "-o", str(out), "--json", str(report), "--idle", "120", "--duration", "120"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        lines: queue.Queue = queue.Queue()
        threading.Thread(target=lambda: [lines.put(s) for s in proc.stderr], daemon=True).start()
        first = lines.get(timeout=60)
        assert first.startswith("listening on 127.0.0.1:"), first
        send_frames(frames[:90], "127.0.0.1", int(first.rsplit(":", 1)[1]))
        # readable while it runs: released windows reach the file before any stop
        deadline = time.monotonic() + 60
        while out.read_text().count("\n") < 2 and time.monotonic() < deadline:
            threading.Event().wait(0.02)
        assert out.read_text().count("\n") >= 2
        proc.send_signal(sig)
        stdout, _ = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 0, stdout
    got = np.loadtxt(out, delimiter=",", skiprows=1)
    # reference: the batch decoder on the same 90 frames, the rest of the known end lost
    ref = codec.decode(b"".join(frames[:90]), enc.profile, samples=600)
    assert np.array_equal(got, ref.samples, equal_nan=True)
    r = json.loads(report.read_text())
    assert r["datagrams"] == 90 and r["stopped"] == signal.Signals(sig).name
    assert r["samples_delivered"] == int(np.isfinite(ref.samples).sum())
    assert r["samples_delivered"] + r["samples_lost"] == 600 * 3


def test_port_zero_only_where_asked():
    assert parse_endpoint("127.0.0.1:0", allow_any_port=True) == ("127.0.0.1", 0)
    with pytest.raises(codec.InputError):
        parse_endpoint("127.0.0.1:0")


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
