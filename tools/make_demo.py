"""Generate the shipped demo scenarios (seeded) and their profiles.

Both scenarios are invented:

* ``ridge_station`` -- a solar-powered environmental station on an imaginary
  upland ridge, reporting once a minute for two days: a daily temperature
  cycle, a weather front passing on the second afternoon (pressure drop,
  temperature fall, humidity rise, gusts), a battery charged by day.
* ``orbiter_hk`` -- housekeeping of an imaginary small research satellite in
  a 95-minute low orbit, sampled every 4 s over two orbits: panel temperature
  cooling through eclipse, sun sensor, battery voltage, bus current stepping
  when the payload switches on, and a 3-axis magnetometer with a slow tumble.

Every channel carries sensor noise and the quantization of its stated
resolution, plus an occasional spike, as real telemetry does.

Run ``python tools/make_demo.py`` to rewrite ``codec/data/*.csv`` and the
profiles in ``profiles/`` and ``codec/data/`` (the installed demo reads the
latter).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
SEED = 20261201


def _quantize(x: np.ndarray, resolution: float) -> np.ndarray:
    return np.round(x / resolution) * resolution


def ridge_station(rng: np.random.Generator):
    dt = 60.0
    t = np.arange(2 * 24 * 60) * dt
    day = 2 * np.pi * t / 86400.0
    sun = np.clip(np.sin(day - np.pi / 2 + 0.3), 0, None)  # daylight bump, peak early afternoon
    front = 1 / (1 + np.exp(-(t - 1.55 * 86400) / 1800.0))  # the front arrives on day 2
    drift = 0.05 * np.cumsum(rng.normal(0, 0.02, t.size))
    temp = 276.0 + 5.5 * np.sin(day - 2.2) - 4.0 * front + drift
    humid = np.clip(78 - 12 * np.sin(day - 2.2) + 15 * front + rng.normal(0, 0.15, t.size), 5, 100)
    press = 1012.0 - 9.0 * front + 0.8 * np.sin(day / 2) + rng.normal(0, 0.05, t.size)
    gust = np.abs(rng.normal(0, 1.0 + 3.0 * front, t.size))
    wind = np.clip(3.0 + 2.0 * sun + 5.0 * front + gust, 0, None)
    clouds = 1 - 0.6 * front * np.abs(np.sin(t / 900.0))
    solar = 820.0 * sun * clouds + rng.normal(0, 2.0, t.size)
    charge = np.convolve(sun, np.ones(90) / 90, mode="same")
    batt = 12.4 + 0.9 * charge + rng.normal(0, 0.004, t.size)
    spikes = rng.choice(t.size, 3, replace=False)
    wind[spikes] += 14.0  # a few gust spikes
    # (name, values, resolution, raw bits, unit, plausible range): the range is what the
    # physics and the sensor allow, not the data's own spread (values outside are faults).
    chans = [
        ("air_temp_k", temp, 0.01, 12, "K", (223.15, 323.15)),  # -50 .. +50 degC
        ("rel_humidity_pct", humid, 0.1, 10, "%", (0.0, 100.0)),
        # lowest and highest sea-level pressures on record are about 870 and 1084 hPa
        ("pressure_hpa", press, 0.1, 14, "hPa", (850.0, 1085.0)),
        ("wind_speed_m_s", wind, 0.1, 10, "m/s", (0.0, 75.0)),  # a speed is never negative
        # never negative; the solar constant (about 1361 W/m2) bounds it from above
        ("solar_w_m2", np.clip(solar, 0, None), 1.0, 12, "W/m²", (0.0, 1400.0)),
        # a 12 V lead-acid battery: deep discharge to equalising charge
        ("battery_v", batt, 0.001, 14, "V", (10.5, 14.8)),
    ]
    return t, dt, chans


def orbiter_hk(rng: np.random.Generator):
    dt = 4.0
    period = 95 * 60.0
    t = np.arange(int(2 * period / dt)) * dt
    phase = (t % period) / period
    eclipse = (phase > 0.62) & (phase < 0.99)
    sun_sensor = np.where(eclipse, 0.0, np.clip(np.cos(2 * np.pi * t / 240.0), 0, None))
    # Panel temperature relaxes towards a sunlit or an eclipse equilibrium (first-order lag).
    target = np.where(eclipse, 243.0, 318.0)
    alpha = dt / 900.0
    temp = np.empty(t.size)
    temp[0] = 300.0
    for i in range(1, t.size):  # a physical lag model, run once when the demo data is made
        temp[i] = temp[i - 1] + alpha * (target[i] - temp[i - 1])
    temp += rng.normal(0, 0.05, t.size)
    payload_on = ((t % period) > 1200) & ((t % period) < 2400)
    current = 0.45 + 0.85 * payload_on + 0.3 * (~eclipse) * 0 + rng.normal(0, 0.004, t.size)
    batt = 7.6 + 0.35 * np.where(eclipse, -1, 1) * np.minimum(1, (t % period) / 1500) \
        - 0.08 * payload_on + rng.normal(0, 0.003, t.size)
    orbit = 2 * np.pi * t / period
    tumble = 2 * np.pi * t / 310.0
    mag_x = 28000 * np.cos(orbit) * np.cos(tumble) + rng.normal(0, 12, t.size)
    mag_y = 28000 * np.cos(orbit) * np.sin(tumble) + rng.normal(0, 12, t.size)
    mag_z = 42000 * np.sin(orbit) + rng.normal(0, 12, t.size)
    spikes = rng.choice(t.size, 2, replace=False)
    mag_x[spikes] += 3000.0  # single-event upsets in the magnetometer read-out
    chans = [
        ("panel_temp_k", temp, 0.05, 12, "K", (173.15, 393.15)),  # -100 .. +120 degC
        # the cosine of the sun angle, dimensionless (SI unit one)
        ("sun_sensor", sun_sensor, 0.001, 10, "1", (0.0, 1.0)),
        ("battery_v", batt, 0.002, 12, "V", (6.0, 8.4)),  # two lithium-ion cells in series
        ("bus_current_a", current, 0.001, 12, "A", (0.0, 3.0)),
        # the geomagnetic field stays below about 65 000 nT in magnitude
        ("mag_x_nt", mag_x, 5.0, 16, "nT", (-65000.0, 65000.0)),
        ("mag_y_nt", mag_y, 5.0, 16, "nT", (-65000.0, 65000.0)),
        ("mag_z_nt", mag_z, 5.0, 16, "nT", (-65000.0, 65000.0)),
    ]
    return t, dt, chans


SCENARIOS = {
    "ridge_station": (ridge_station, "Invented upland environmental station, 1 sample/min"),
    "orbiter_hk": (orbiter_hk, "Invented small research satellite housekeeping, 1 sample/4 s"),
}


def _profile_toml(description: str, dt: float, chans) -> str:
    lines = [
        f'description = "{description}"',
        "frame_length = 64",
        'basis = "dct"',
        "fidelity = 0.99",
        'reference = "ac"',
        "",
    ]
    for name, values, res, bits, unit, (lo, hi) in chans:
        q = _quantize(values, res)
        if q.min() < lo or q.max() > hi:  # our bug: the invented data must be plausible
            raise RuntimeError(f"{name}: data outside its plausible range {lo} .. {hi}")
        lines += [
            "[[channels]]",
            f'name = "{name}"',
            f'unit = "{unit}"',
            f"resolution = {res}",
            f"raw_bits_per_sample = {bits}",
            f"sample_rate_hz = {1.0 / dt!r}",
            f"valid_min = {lo!r}",
            f"valid_max = {hi!r}",
            "",
        ]
    return "\n".join(lines)


def main() -> None:
    for name, (make, description) in SCENARIOS.items():
        rng = np.random.default_rng([SEED, len(name)])
        t, dt, chans = make(rng)
        cols = [t] + [_quantize(v, res) for _, v, res, *_ in chans]
        header = ",".join(["time"] + [c[0] for c in chans])
        np.savetxt(ROOT / "codec/data" / f"{name}.csv", np.column_stack(cols), delimiter=",",
                   header=header, comments="", fmt="%.6g")
        toml = _profile_toml(description, dt, chans)
        for folder in (ROOT / "profiles", ROOT / "codec/data"):
            (folder / f"{name}.toml").write_text(toml, encoding="utf-8")
        print(f"{name}: {t.size} samples x {len(chans)} channels")
    make_fleet()


# --- the demo fleet (survey / report) --------------------------------------------------

#: Stations of the invented ridge network and what goes wrong at each (none: healthy).
FLEET_FAULTS = {
    3: "humidity sensor sticks at one reading from the second day",
    5: "pressure sensor drifts upwards by about 2 hPa a day",
    7: "anemometer bearing fails: the wind reading collapses to zero with jumps",
    9: "battery ageing: the voltage sags a little more each night",
    11: "one day's file is damaged in transfer (a garbled row)",
    12: "temperature probe picks up interference (noise ten times the usual)",
}
FLEET_STATIONS = 12
FLEET_DAYS = 3
FLEET_STEP_S = 300.0
FLEET_FIRST_DAY = 10  # 2026-03-10, an invented survey period


def _fleet_station(rng: np.random.Generator, k: int):
    """Three days of one fleet station at one sample every 5 minutes, with its fault."""
    t = np.arange(int(FLEET_DAYS * 86400 / FLEET_STEP_S)) * FLEET_STEP_S
    day = 2 * np.pi * t / 86400.0
    sun = np.clip(np.sin(day - np.pi / 2 + 0.3), 0, None)
    front_at = rng.uniform(0.8, 2.4) * 86400  # the same weather reaches each station at its time
    front = 1 / (1 + np.exp(-(t - front_at) / 2400.0))
    height = rng.uniform(-3.0, 3.0)  # stations sit at different heights on the ridge
    drift = 0.05 * np.cumsum(rng.normal(0, 0.03, t.size))
    temp = 276.0 + height + 5.5 * np.sin(day - 2.2) - 4.0 * front + drift
    humid = np.clip(78 - 12 * np.sin(day - 2.2) + 15 * front + rng.normal(0, 0.3, t.size), 5, 100)
    press = 1012.0 - 0.12 * height * 10 - 9.0 * front + rng.normal(0, 0.05, t.size)
    wind = np.clip(3.0 + 2.0 * sun + 5.0 * front + np.abs(rng.normal(0, 1 + 3 * front, t.size)),
                   0, None)
    solar = np.clip(820.0 * sun * (1 - 0.6 * front * np.abs(np.sin(t / 900.0)))
                    + rng.normal(0, 2.0, t.size), 0, None)
    charge = np.convolve(sun, np.ones(18) / 18, mode="same")
    batt = 12.4 + 0.9 * charge + rng.normal(0, 0.004, t.size)
    if k == 3:
        humid[t >= 86400] = humid[int(86400 / FLEET_STEP_S)]
    if k == 5:
        press += 2.0 * t / 86400
    if k == 7:
        broken = t >= rng.uniform(0.5, 1.5) * 86400
        jumps = rng.random(t.size) < 0.05
        wind = np.where(broken, np.where(jumps, rng.uniform(5, 25, t.size), 0.0), wind)
    if k == 9:
        batt -= 0.25 * (t / 86400) * (1 - charge)
    if k == 12:
        temp += rng.normal(0, 0.3, t.size)
    chans = [
        ("air_temp_k", temp, 0.01, 12), ("rel_humidity_pct", humid, 0.1, 10),
        ("pressure_hpa", press, 0.1, 14), ("wind_speed_m_s", wind, 0.1, 10),
        ("solar_w_m2", solar, 1.0, 12), ("battery_v", batt, 0.001, 14),
    ]
    return t, chans


def _fleet_link(k: int, distance_km: float, terrain_db: float) -> str:
    return "\n".join([
        f"# Invented fleet link of station ridge{k:02d} (demo data, illustrative figures).",
        f'description = "ridge{k:02d} to valley gateway, 868 MHz, {distance_km:g} km"',
        "frequency_hz = 868.0e6",
        f"distance_m = {distance_km * 1e3:.1f}",
        "tx_power_w = 0.025",
        "tx_antenna_gain_dbi = 2.15",
        "rx_antenna_gain_dbi = 6.0",
        "system_noise_temperature_k = 800.0",
        "data_rate_bps = 1200.0",
        'modulation = "bpsk"',
        'fec = "none"',
        "target_ber = 1e-5",
        "required_margin_db = 10.0",
        "",
        "[losses_db]",
        "cables = 2.0",
        f"terrain_and_foliage = {terrain_db:g}",
        "implementation = 1.0",
        "",
    ])


def make_fleet(root: Path = ROOT / "profiles" / "fleet") -> None:
    """Write the invented ridge fleet: one CSV per station and day, a link file per station.

    Files are ``archive/ridgeNN_2026-03-DD.csv`` (survey them with
    ``--group-by '{station}_{date}.csv'``), ``links/ridgeNN.link.toml`` and the
    fleet's profile ``ridge_fleet.toml``.  Most stations reach the gateway with
    margin to spare; the two farthest, behind the ridge, do not.
    """
    rng = np.random.default_rng([SEED, 7])
    (root / "archive").mkdir(parents=True, exist_ok=True)
    (root / "links").mkdir(parents=True, exist_ok=True)
    per_day = int(86400 / FLEET_STEP_S)
    ranges = {}
    for k in range(1, FLEET_STATIONS + 1):
        t, chans = _fleet_station(rng, k)
        for name, values, _, _ in chans:
            lo, hi = ranges.get(name, (np.inf, -np.inf))
            ranges[name] = (min(lo, float(values.min())), max(hi, float(values.max())))
        cols = np.column_stack([t] + [_quantize(v, res) for _, v, res, _ in chans])
        header = ",".join(["time"] + [c[0] for c in chans])
        for d in range(FLEET_DAYS):
            rows = cols[d * per_day:(d + 1) * per_day]
            path = root / "archive" / f"ridge{k:02d}_2026-03-{FLEET_FIRST_DAY + d:02d}.csv"
            np.savetxt(path, rows, delimiter=",", header=header, comments="", fmt="%.6g")
            if k == 11 and d == 1:  # damaged in transfer: one row garbled
                lines = path.read_text(encoding="utf-8").splitlines()
                lines[100] = lines[100][:9] + "#~?" + lines[100][12:]
                path.write_text("\n".join(lines) + "\n", encoding="utf-8")
        far = k in (4, 10)  # behind the ridge: far and through forest
        distance = float(np.round(rng.uniform(35, 45) if far else rng.uniform(3, 18), 1))
        terrain = 32.0 if far else float(np.round(rng.uniform(8, 20)))
        (root / "links" / f"ridge{k:02d}.link.toml").write_text(
            _fleet_link(k, distance, terrain), encoding="utf-8")
    spec = [(name, np.array(ranges[name]), res, bits) for name, _, res, bits in chans]
    toml = _profile_toml("Invented ridge fleet, 1 sample every 5 min per station",
                         FLEET_STEP_S, spec)
    (root / "ridge_fleet.toml").write_text(toml, encoding="utf-8")
    faults = "\n".join(f"- ridge{k:02d}: {text}" for k, text in FLEET_FAULTS.items())
    (root / "README.md").write_text(
        "# Demo fleet (invented)\n\nTwelve stations of the invented ridge network, three days "
        "each, one sample every 5 minutes; made by `python tools/make_demo.py`.\n\n"
        f"What goes wrong where:\n\n{faults}\n\nStations ridge04 and ridge10 sit behind the "
        "ridge, far from the gateway.\n", encoding="utf-8")
    print(f"fleet: {FLEET_STATIONS} stations x {FLEET_DAYS} days in {root}")


if __name__ == "__main__":
    main()
