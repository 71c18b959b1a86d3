"""From the rows of a survey to the answers: per group, per sensor class, per link.

Per group (station): the days covered, bits per day per channel and in all at
each fidelity (each channel with its best basis: the one with the fewest bits
summed over the group's files), and the highest fidelity whose stream the
group's link carries (:func:`link_sim._survey.link_verdict`).

Per sensor class (a channel name across the fleet): one profile, the basis
with the fewest bits over the whole fleet at the fleet's fidelity, which is
the lowest of the fidelities chosen for the groups that fit (so one profile
serves every station that fits).

Everything the page needs is written to ``summary.json``; the tables also go
to CSV beside it.
"""

from __future__ import annotations

import csv
import json
import math
from collections import defaultdict
from pathlib import Path

import numpy as np

from codec import CoefwireError, Profile, decode, encode, error_figures
from codec.cli.common import json_ready

from ._budget import compute_budget
from ._cli_budget import CAUTIONS as LINK_CAUTIONS
from ._linkfile import load_link
from ._survey import DAY_S, ROW_KEYS, ArchiveFile, SurveySettings, link_verdict, read_recording
from ._survey_run import read_parts

__all__ = ["GROUP_KEYS", "GROUP_CHANNEL_KEYS", "CODEC_CAUTION", "summarize", "finish_survey",
           "EXAMPLE_SAMPLES"]

#: Keys of the per-group summary, in table order.
GROUP_KEYS = (
    "group", "files", "files_failed", "days", "link_file", "link_description", "fidelity",
    "fits", "limited_by", "bits_per_day", "stream_bps", "on_air_bps", "data_rate_bps",
    "margin_db", "required_margin_db", "frames_below_target",
)
#: Keys of the per-group, per-channel table (best basis per channel and fidelity).
GROUP_CHANNEL_KEYS = ("group", "channel", "fidelity_target", "basis", "bits_per_day",
                      "frames_below_target")
#: Samples shown in each reconstruction example.
EXAMPLE_SAMPLES = 288

CODEC_CAUTION = ("Lossy coding: do not use it for signals on which safety depends unless the "
                 "fidelity has been justified for that use.")


def _num(v) -> float | None:
    return None if v is None or (isinstance(v, float) and not math.isfinite(v)) else v


def summarize(rows: list[dict], settings: SurveySettings,
              links: dict[str, str | None]) -> dict:
    """The survey's answers from its rows.

    ``links`` maps each group to its link file (None: no link given).
    """
    fids = sorted(settings.fidelities)
    order = list(settings.bases)
    ok = [r for r in rows if r["error"] is None]
    errors = [{"file": r["file"], "group": r["group"], "period": r["period"],
               "error": r["error"]} for r in rows if r["error"] is not None]
    groups = sorted({r["group"] for r in rows} | set(links))
    channels = list(dict.fromkeys(r["channel"] for r in ok if r["channel"] != "all"))

    # Sums per (group, channel, basis, fidelity) over the group's files.
    bits: dict = defaultdict(float)
    below: dict = defaultdict(int)
    seconds: dict = defaultdict(float)
    for r in ok:
        key = (r["group"], r["channel"], r["basis"], r["fidelity_target"])
        bits[key] += r["bits"]
        below[key] += r["frames_below_target"]
        if r["channel"] == "all" and r["basis"] == order[0] and r["fidelity_target"] == fids[0]:
            seconds[r["group"]] += r["duration_s"]

    budgets = {}
    for path in sorted({p for p in links.values() if p}):
        budgets[path] = compute_budget(load_link(path))

    group_rows, channel_rows = [], []
    for g in groups:
        files = {r["file"] for r in rows if r["group"] == g}
        failed = {r["file"] for r in rows if r["group"] == g and r["error"] is not None}
        days = seconds[g] / DAY_S
        per_f = {}
        for f in fids:
            total, miss, complete = 0.0, 0, True
            for c in channels:
                cands = [(bits[(g, c, b, f)], order.index(b), b) for b in order
                         if (g, c, b, f) in bits]
                if not cands:
                    complete = False
                    continue
                b_bits, _, b = min(cands)  # fewest bits; ties go to the earlier basis
                per_day = b_bits / days if days else None
                total += b_bits
                miss += below[(g, c, b, f)]
                channel_rows.append({"group": g, "channel": c, "fidelity_target": f,
                                     "basis": b, "bits_per_day": per_day,
                                     "frames_below_target": below[(g, c, b, f)]})
            per_f[f] = (total / days if days and complete else None, miss)
        link = links.get(g)
        budget = budgets.get(link) if link else None
        chosen, verdict = None, None
        verdicts = {}
        for f in fids:
            per_day = per_f[f][0]
            if budget is not None and per_day is not None:
                verdicts[f] = link_verdict(budget, per_day / DAY_S)
        fitting = [f for f in fids if f in verdicts and verdicts[f].fits]
        if fitting:
            chosen = fitting[-1]
            verdict = verdicts[chosen]
            higher = [f for f in fids if f > chosen and f in verdicts]
            limited = verdicts[higher[0]].limited_by if higher else None
        elif verdicts:
            verdict = verdicts[fids[0]]
            limited = verdict.limited_by
        else:
            limited = None
        shown = chosen if chosen is not None else fids[0]
        per_day, miss = per_f[shown]
        group_rows.append({
            "group": g, "files": len(files), "files_failed": len(failed), "days": days,
            "link_file": link,
            "link_description": budget.link.description if budget else None,
            "fidelity": chosen,
            "fits": (bool(fitting) if verdicts else None),
            "limited_by": limited,
            "bits_per_day": per_day,
            "stream_bps": per_day / DAY_S if per_day is not None else None,
            "on_air_bps": verdict.on_air_bps if verdict else None,
            "data_rate_bps": verdict.data_rate_bps if verdict else None,
            "margin_db": verdict.margin_db if verdict else None,
            "required_margin_db": verdict.required_margin_db if verdict else None,
            "frames_below_target": miss,
            "by_fidelity": [{"fidelity": f, "bits_per_day": per_f[f][0],
                             "fits": verdicts[f].fits if f in verdicts else None,
                             "limited_by": verdicts[f].limited_by if f in verdicts else None}
                            for f in fids],
        })

    fits_f = [r["fidelity"] for r in group_rows if r["fidelity"] is not None]
    fleet_f = min(fits_f) if fits_f else max(fids)
    classes = _classes(ok, channels, order, fleet_f, len(groups))
    curves = _curves(ok, channels, order, fids)
    link_docs = {path: {"description": b.link.description, "distance_m": b.distance_m,
                        "lines": [line.as_dict() for line in b.lines],
                        "figures": {k: v for k, v in b.figures.items()
                                    if isinstance(v, int | float | bool | str)}}
                 for path, b in budgets.items()}
    return {
        "files": len({r["file"] for r in rows}),
        "files_failed": len(errors),
        "groups": group_rows,
        "group_channels": channel_rows,
        "fleet_fidelity": fleet_f,
        "sensor_classes": classes,
        "curves": curves,
        "errors": errors,
        "links": link_docs,
        "cautions": [CODEC_CAUTION, *LINK_CAUTIONS],
    }


def _classes(ok, channels, order, fleet_f, n_groups) -> list[dict]:
    """One profile per sensor class: fewest bits over the fleet at the fleet's fidelity."""
    out = []
    for c in channels:
        sel = [r for r in ok if r["channel"] == c and r["fidelity_target"] == fleet_f]
        if not sel:
            continue
        total = defaultdict(float)
        for r in sel:
            total[r["basis"]] += r["bits"]
        best = min(total, key=lambda b: (total[b], order.index(b)))
        mine = [r for r in sel if r["basis"] == best]
        days = sum(r["duration_s"] for r in mine) / DAY_S
        ident = total.get("identity")
        out.append({
            "channel": c, "basis": best, "fidelity": fleet_f,
            "bits_per_day_per_station": total[best] / days if days else None,
            "bits_saved_percent": 100.0 * (1 - total[best] / ident) if ident else None,
            "snr_db_min": _min([r["snr_db"] for r in mine]),
            "max_abs_error": _max([r["max_abs_error"] for r in mine]),
            "frames_below_target": int(sum(r["frames_below_target"] for r in mine)),
            "files": len(mine),
        })
    return out


def _min(values):
    v = [x for x in values if x is not None]
    return min(v) if v else None


def _max(values):
    v = [x for x in values if x is not None]
    return max(v) if v else None


def _curves(ok, channels, order, fids) -> list[dict]:
    """Rate against fidelity: fleet bits per station-day per channel class and basis."""
    total: dict = defaultdict(float)
    secs: dict = defaultdict(float)
    for r in ok:
        key = (r["channel"], r["basis"], r["fidelity_target"])
        total[key] += r["bits"]
        secs[key] += r["duration_s"]
    out = []
    for c in [*channels, "all"]:
        for b in order:
            pts = [(f, total[(c, b, f)] / secs[(c, b, f)] * DAY_S) for f in fids
                   if secs.get((c, b, f))]
            if pts:
                out.append({"channel": c, "basis": b, "fidelity": [p[0] for p in pts],
                            "bits_per_day": [p[1] for p in pts]})
    return out


def _examples(items: list[ArchiveFile], ok_files: set[str], settings: SurveySettings,
              classes: list[dict]) -> list[dict]:
    """One reconstruction per sensor class with its chosen profile: the archive's first file."""
    first = next((i for i in items if i.path in ok_files), None)
    if first is None or not classes:
        return []
    try:
        table = read_recording(first.path)
    except CoefwireError:
        return []
    profile = Profile.model_validate(settings.profile).bind(table.names)
    rate = next((c.sample_rate_hz for c in profile.channels if c.sample_rate_hz), None)
    out = []
    n = min(EXAMPLE_SAMPLES, table.values.shape[0])
    for cls in classes:
        c = table.names.index(cls["channel"])
        spec = profile.channels[c]
        one = profile.model_copy(update={"channels": (spec,)}).override(
            basis=cls["basis"], fidelity=cls["fidelity"])
        x = table.values[:, [c]]
        enc = encode(x, one)
        xh = decode(enc.data, enc.profile, samples=x.shape[0]).samples
        figs = error_figures(x, xh)
        if table.time is not None:
            t = table.time[:n] - table.time[0]
        else:
            t = np.arange(n) / (rate or 1.0)
        out.append({"channel": cls["channel"], "file": first.path, "basis": cls["basis"],
                    "fidelity": cls["fidelity"], "time_s": t.tolist(),
                    "original": x[:n, 0].tolist(), "decoded": xh[:n, 0].tolist(),
                    "max_abs_error": figs["max_abs_error"], "snr_db": figs["snr_db"],
                    "resolution": spec.resolution})
    return out


def _write_profiles(out: Path, settings: SurveySettings, classes: list[dict],
                    rows: list[dict]) -> dict[str, str]:
    """One profile file per sensor class, ``DIR/profiles/CHANNEL.toml``: the chosen basis and
    fidelity with the channel's spec from the survey's profile."""
    from codec import ChannelSpec, atomic_output, save_profile

    base = Profile.model_validate(settings.profile)
    specs = {c.name: c for c in base.channels}
    rates = {r["channel"]: r["sample_rate_hz"] for r in rows if r["error"] is None}
    folder = out / "profiles"
    folder.mkdir(exist_ok=True)
    written = {}
    for cls in classes:
        name = cls["channel"]
        spec = specs.get(name) or ChannelSpec(name=name, sample_rate_hz=rates.get(name))
        prof = base.model_copy(update={"channels": (spec,)}).override(
            basis=cls["basis"], fidelity=cls["fidelity"],
            description=f"sensor class {name}: chosen by coefwire survey")
        path = folder / f"{name}.toml"
        with atomic_output(path) as tmp:
            save_profile(prof, tmp)
        written[name] = str(path.relative_to(out))
    return written


def _write_csv(path: Path, keys, rows) -> None:
    from codec import atomic_output

    with atomic_output(path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(keys), extrasaction="ignore")
        w.writeheader()
        for r in rows:
            w.writerow({k: ("" if r.get(k) is None else
                            repr(r[k]) if isinstance(r[k], float) else r[k]) for k in keys})


def finish_survey(out: Path, items: list[ArchiveFile], settings: SurveySettings,
                  links: dict[str, str | None], inputs: list[str]) -> dict:
    """Gather the finished rows and write rows.csv, groups.csv, group_channels.csv, summary.json.

    Returns the summary (what ``summary.json`` holds).
    """
    from codec import atomic_output

    rows = read_parts(out, items, settings.fingerprint())
    summary = summarize(rows, settings, links)
    ok_files = {r["file"] for r in rows if r["error"] is None}
    summary["examples"] = _examples(items, ok_files, settings, summary["sensor_classes"])
    summary["inputs"] = list(inputs)
    summary["settings"] = {"bases": list(settings.bases),
                           "fidelities": list(settings.fidelities),
                           "group_by": settings.group_by,
                           "profile": settings.profile}
    summary["missing"] = len(items) - len({r["file"] for r in rows})
    summary["profiles"] = _write_profiles(out, settings, summary["sensor_classes"], rows)
    _write_csv(out / "rows.csv", ROW_KEYS, rows)
    _write_csv(out / "groups.csv", GROUP_KEYS, summary["groups"])
    _write_csv(out / "group_channels.csv", GROUP_CHANNEL_KEYS, summary["group_channels"])
    with atomic_output(out / "summary.json") as tmp:
        tmp.write_text(json.dumps(json_ready(summary), indent=1) + "\n", encoding="utf-8")
    return summary
