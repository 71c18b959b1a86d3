"""``send --rate-bps R``: the average rate on the modelled link stays within 1 % of R.

The clock and the sleep are stand-ins (no timed test): the sleep wakes up late by a
random amount, as an operating system's does, and the check is the definition of an
average rate, bits sent / time taken, with the time running to the end of the last
frame on a link of rate R (a frame of b bits occupies a link of rate R for b / R s).
"""

from __future__ import annotations

import contextlib
import io
import json
import socket

import numpy as np
import pytest

from codec.cli import main
from link_sim import _udp
from link_sim._udp import SEND_COUNTED, send_frames


class _FakeTime:
    """A clock whose sleep overshoots by 0 to ``late_s`` seconds (seeded)."""

    def __init__(self, late_s: float, seed: int):
        self.now = 0.0
        self.late_s = late_s
        self.rng = np.random.default_rng(seed)
        self.departures: list[float] = []

    def clock(self) -> float:
        return self.now

    def sleep(self, s: float) -> None:
        self.now += s + self.late_s * float(self.rng.random())


@pytest.fixture()
def sink():
    with socket.socket(socket.AF_INET, socket.SOCK_DGRAM) as s:
        s.bind(("127.0.0.1", 0))
        yield s.getsockname()[1]


def _frames(rng, count):
    return [bytes(int(n)) for n in rng.integers(20, 200, count)]


@pytest.mark.parametrize("count,rate", [(5, 9600.0), (40, 1200.0), (300, 250_000.0)])
def test_average_rate_within_one_percent(sink, count, rate, monkeypatch):
    rng = np.random.default_rng(count)
    frames = _frames(rng, count)
    fake = _FakeTime(late_s=2e-3, seed=count)
    real_sendto = socket.socket.sendto

    def record(self, data, addr):
        fake.departures.append(fake.now)
        return real_sendto(self, data, addr)

    monkeypatch.setattr(socket.socket, "sendto", record)
    stats = send_frames(frames, "127.0.0.1", sink, rate_bps=rate, clock=fake.clock,
                        sleep=fake.sleep)
    bits = 8 * sum(map(len, frames))
    assert stats.bytes * 8 == bits and stats.frames == count
    # Average rate = bits / time, the time running to the end of the last frame at R.
    assert bits / stats.seconds == pytest.approx(rate, rel=0.01)
    assert stats.average_bps == pytest.approx(bits / stats.seconds)
    assert abs(stats.rate_error_percent) < 1.0
    # And no frame leaves before the link of rate R has carried the bits before it.
    before = np.cumsum([0] + [8 * len(f) for f in frames[:-1]]) / rate
    assert np.all(np.array(fake.departures) >= before - 1e-12)
    # Late wake-ups do not add up: each departure is at most one overshoot behind.
    assert np.all(np.array(fake.departures) <= before + 2e-3 + 1e-12)


def test_send_reports_what_it_counted(tmp_path, sink, monkeypatch, capsys):
    # Stand-in time for the command too (no real sleeping in tests).
    fake = _FakeTime(late_s=1e-3, seed=1)
    monkeypatch.setattr(_udp.time, "monotonic", fake.clock)
    monkeypatch.setattr(_udp.time, "sleep", fake.sleep)
    monkeypatch.setattr(_udp, "send_frames", _with_fake_defaults(fake))
    stream = tmp_path / "s.cwire"
    samples = tmp_path / "x.csv"
    t = np.arange(4000)  # a stream of about a second at 9600 bit/s
    np.savetxt(samples, np.column_stack([np.sin(t / 7.0), np.cos(t / 11.0)]), delimiter=",",
               header="a,b", comments="")
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(["encode", str(samples), "-o", str(stream)]) == 0
    capsys.readouterr()
    out = tmp_path / "send.json"
    assert main(["send", str(stream), "--udp", f"127.0.0.1:{sink}", "--rate-bps", "9600",
                 "--json", str(out)]) == 0
    r = json.loads(out.read_text())
    assert r["counted"] == SEND_COUNTED and "UDP" in r["counted"]
    assert r["bits"] == 8 * stream.stat().st_size  # every byte of the stream is frame bytes
    assert r["average_bps"] == pytest.approx(r["bits"] / r["seconds"])
    assert abs(r["rate_error_percent"]) < 1.0 and r["rate_bps"] == 9600.0
    text = capsys.readouterr().out
    assert "bits counted" in text and "time counted" in text and "% from the asked" in text


def _with_fake_defaults(fake):
    real = send_frames

    def send(frames, host, port, rate_bps=None):
        return real(frames, host, port, rate_bps, clock=fake.clock, sleep=fake.sleep)
    return send


def test_rate_must_be_positive_and_finite(sink):
    from codec import InputError
    for bad in (0.0, -5.0, float("inf"), float("nan")):
        with pytest.raises(InputError, match="rate"):
            send_frames([b"\x00"], "127.0.0.1", sink, rate_bps=bad)
