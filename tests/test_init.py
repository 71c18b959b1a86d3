"""``coefwire init``: profiles drawn from a sample, resolution detection."""

import numpy as np
import pytest
from realdata import vega_csv

import codec
from codec._infer import find_quantum, infer_profile
from codec.cli import main


@pytest.mark.parametrize("quantum", [1.0, 0.1, 0.005, 0.25, 5 / 1024, 2.5e-4, 20.0])
def test_quantum_of_generated_readings(quantum):
    # Readings k * q for random integers k (an ADC or a logger rounding to q): the
    # largest quantum they are multiples of is q (the codes' gcd is 1 with many values).
    rng = np.random.default_rng(int(quantum * 1e6) % 2**32)
    k = rng.integers(-3000, 3000, 5000)
    values = k * quantum
    q = find_quantum(values)
    assert q is not None and q.value == pytest.approx(quantum, rel=1e-12)
    assert q.samples == values.size and q.distinct == np.unique(values).size


def test_quantum_is_the_largest_common_one():
    # even counts only: the data carry no evidence of a step finer than 2 q
    k = np.random.default_rng(1).integers(-100, 100, 500) * 2
    assert find_quantum(k * 0.01).value == pytest.approx(0.02, rel=1e-12)


def test_no_quantum_for_computed_values():
    # Gaussian floats are multiples of no decimal (10^-9) or binary (2^-40) quantum
    rng = np.random.default_rng(2)
    assert find_quantum(rng.normal(size=1000)) is None
    assert find_quantum(np.full(10, 3.0)) is None  # one value: no step to see


def test_quantum_of_real_weather_records_shipped_by_vega_datasets():
    # Hourly air temperature of Seattle in 2010 (vega_datasets, BSD-3-Clause; public-domain
    # NOAA data): the shipped seattle-temps.csv gives every reading in degrees Fahrenheit
    # to one decimal, i.e. a quantum of 0.1 degF, and nearly every 0.1 step between
    # neighbouring levels occurs.
    temps = vega_csv("seattle-temps", (1,))
    q = find_quantum(temps)
    assert q.value == pytest.approx(0.1, rel=1e-12) and q.samples == 8759
    assert q.gap_share > 0.9
    # Daily maximum temperature, Seattle 2012-2015 (seattle-weather.csv, same source): one
    # decimal of degC, but the readings are whole degrees Fahrenheit converted (the US
    # daily records are kept in whole degF, from memory; checked here on the data: each
    # value is within 0.12 degF of a whole degF).  The printed quantum is still 0.1 degC,
    # and most 0.1 steps between neighbouring levels never occur (1 degF = 0.56 degC).
    tmax = vega_csv("seattle-weather", (2,))
    fahrenheit = tmax * 9 / 5 + 32
    assert np.abs(fahrenheit - np.rint(fahrenheit)).max() < 0.121
    q = find_quantum(tmax)
    assert q.value == pytest.approx(0.1, rel=1e-12)
    assert q.gap_share < 0.2
    # Wind speed (m/s, one decimal) in the same file: a quantum of 0.1 m/s.
    assert find_quantum(vega_csv("seattle-weather", (4,))).value == pytest.approx(0.1, rel=1e-12)


def _write_csv(path, time, cols, names):
    header = ",".join(["time", *names])
    np.savetxt(path, np.column_stack([time, *cols]), delimiter=",", header=header,
               comments="", fmt="%.10g")


def test_init_writes_a_commented_profile_that_codes_the_sample(tmp_path, capsys):
    rng = np.random.default_rng(5)
    s = 4096
    t = np.arange(s) / 250.0  # 250 Hz
    a = np.rint(np.cumsum(rng.normal(size=s)) * 40) * 0.005  # a 0.005 mV quantum
    b = np.rint(200 * np.sin(2 * np.pi * t) + rng.normal(size=s) * 3)  # ADC counts
    src, out = tmp_path / "in.csv", tmp_path / "p.toml"
    _write_csv(src, t, [a, b], ["ecg_mv", "adc"])
    assert main(["init", str(src), "-o", str(out), "--fidelity", "0.99"]) == 0
    text = out.read_text()
    assert "# resolution: all 4096 values are integer multiples of 0.005" in text
    prof = codec.load_profile(out)
    assert [c.name for c in prof.channels] == ["ecg_mv", "adc"]
    assert prof.channels[0].resolution == pytest.approx(0.005)
    assert prof.channels[1].resolution == 1.0
    # raw bits: ceil(log2(levels)) of the observed range at that resolution
    levels = (b.max() - b.min()) + 1
    assert prof.channels[1].raw_bits_per_sample == int(np.ceil(np.log2(levels)))
    assert prof.channels[0].sample_rate_hz == pytest.approx(250.0)
    assert prof.channels[0].valid_min < a.min() and prof.channels[0].valid_max > a.max()
    # the basis and N it chose code the sample in no more bits than the default profile
    x = np.column_stack([a, b])
    chosen = len(codec.encode(x, prof).data)
    default = len(codec.encode(x, prof.model_copy(update={"basis": "dct",
                                                           "frame_length": 64})).data)
    assert chosen <= default


def test_init_says_what_it_cannot_infer(tmp_path, capsys):
    rng = np.random.default_rng(6)
    src, out = tmp_path / "in.npy", tmp_path / "p.toml"
    np.save(src, rng.normal(size=(1000, 2)))  # computed floats, no time column
    assert main(["init", str(src), "-o", str(out)]) == 0
    err = capsys.readouterr().err
    assert "resolution of channel 'ch0' not inferred" in err
    assert "sample rate not inferred: the file has no time column" in err
    prof = codec.load_profile(out)
    assert prof.channels[0].resolution == 0.0 and prof.channels[0].sample_rate_hz is None
    assert "# resolution of channel 'ch0' not inferred" in out.read_text()


def test_init_refuses_uneven_time_and_too_short_input(tmp_path, capsys):
    t = np.cumsum(np.random.default_rng(7).uniform(0.5, 1.5, 600))
    inf = infer_profile(np.rint(np.sin(t)[:, None] * 100), ["x"], t)
    assert any("not evenly spaced" in r for r in inf.refusals)
    assert inf.profile.channels[0].sample_rate_hz is None
    src, out = tmp_path / "short.csv", tmp_path / "p.toml"
    _write_csv(src, np.arange(20.0), [np.arange(20.0)], ["x"])
    assert main(["init", str(src), "-o", str(out)]) == 2
    assert "needs at least 64" in capsys.readouterr().err
    assert not out.exists()
