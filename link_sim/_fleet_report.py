"""The survey as one self-contained HTML page for the people who decide.

Everything is inside the one file: styles inline in a ``<style>`` element,
figures drawn with matplotlib as SVG and embedded as ``data:`` URIs with alt
text, no script, no font, no fetch of anything.  It reads well offline and
prints (tables do not split rows; figures scale to the page).

Sections: the verdict per group, the chosen profile per sensor class, bits
per day per group and channel, rate against fidelity, one reconstruction per
sensor class with its error, the link budget with its formulas, the files
that failed, and the cautions.
"""

from __future__ import annotations

import base64
import io
import json
from html import escape
from pathlib import Path

from codec import InputError, atomic_output

__all__ = ["render_report", "write_report", "load_summary"]

# Okabe & Ito's colour-blind-safe palette (Color Universal Design, 2002), darkest first.
_PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#000000", "#E69F00", "#56B4E9",
            "#F0E442")

_CSS = """
:root { color-scheme: light; }
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; color: #1b1b1b;
  background: #ffffff; margin: 0; line-height: 1.45; font-size: 15px; }
main { max-width: 62rem; margin: 0 auto; padding: 1.5rem 1.25rem 3rem; }
h1 { font-size: 1.7rem; margin: 0 0 .25rem; color: #0d2f4f; }
h2 { font-size: 1.25rem; margin: 2.2rem 0 .6rem; color: #0d2f4f;
  border-bottom: 2px solid #0d2f4f; padding-bottom: .2rem; }
p.lead { margin: .2rem 0 1rem; color: #333333; }
.tiles { display: flex; flex-wrap: wrap; gap: .75rem; margin: 1rem 0; }
.tile { border: 1px solid #8a8a8a; border-radius: 6px; padding: .5rem .9rem; min-width: 9rem; }
.tile b { display: block; font-size: 1.5rem; color: #0d2f4f; }
table { border-collapse: collapse; width: 100%; margin: .6rem 0 1rem; font-size: .9rem; }
caption { text-align: left; font-weight: bold; padding: .3rem 0; color: #1b1b1b; }
th, td { border: 1px solid #9a9a9a; padding: .3rem .45rem; text-align: left;
  vertical-align: top; }
th { background: #e8edf2; }
td.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr { break-inside: avoid; }
.ok { background: #d9efdf; color: #0f4a22; font-weight: bold; }
.no { background: #fbe0de; color: #7a1712; font-weight: bold; }
.na { background: #ececec; color: #333333; }
figure { margin: 1rem 0; break-inside: avoid; }
figure img { width: 100%; max-width: 100%; height: auto; border: 1px solid #c8c8c8; }
figcaption { font-size: .88rem; color: #333333; margin-top: .3rem; }
.caution { border-left: 6px solid #b35900; background: #fff4e5; padding: .6rem .9rem;
  margin: .5rem 0; color: #1b1b1b; }
code, pre { font-family: "DejaVu Sans Mono", Consolas, monospace; font-size: .85rem; }
.small { font-size: .85rem; color: #333333; }
@media print { body { font-size: 11pt; } main { max-width: none; padding: 0; }
  h2 { break-after: avoid; } }
"""


def load_summary(folder: str | Path) -> dict:
    """The ``summary.json`` of a finished survey folder."""
    path = Path(folder) / "summary.json"
    if not path.is_file():
        raise InputError("no summary.json here: this is not a finished survey folder; run "
                         "'coefwire survey ... --out DIR' (or --resume) first", str(folder))
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        raise InputError("summary.json cannot be read; run the survey again with --resume",
                         str(path)) from None


def write_report(folder: str | Path, out: str | Path) -> None:
    """Write the page of the survey in ``folder`` to ``out`` (atomically)."""
    html = render_report(load_summary(folder))
    with atomic_output(out) as tmp:
        Path(tmp).write_text(html, encoding="utf-8")


def _f(v, spec=".3g", none="–") -> str:
    return none if v is None else format(v, spec)


def _svg_img(fig, alt: str) -> str:
    """A matplotlib figure as an <img> with an SVG data URI (no file, no fetch)."""
    import matplotlib.pyplot as plt

    buf = io.BytesIO()
    fig.savefig(buf, format="svg", metadata={"Date": None}, bbox_inches="tight")
    plt.close(fig)
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    return f'<img src="data:image/svg+xml;base64,{data}" alt="{escape(alt)}">'


def _verdict_cell(g: dict) -> str:
    if g["fits"] is None:
        return '<td class="na">no verdict</td>'
    if g["fits"]:
        return '<td class="ok">fits</td>'
    return '<td class="no">does not fit</td>'


_LIMITS = {"rate": "stream rate above the radio's", "margin": "link margin",
           "pass_volume": "volume per pass", None: "–"}


def _limit_text(g: dict) -> str:
    if g["fits"] is None:
        return "no link file" if not g.get("link_file") else "no data"
    if g["fits"] and g["limited_by"] is None:
        return "none"
    return _LIMITS.get(g["limited_by"], str(g["limited_by"]))


def _summary_table(s: dict) -> str:
    head = ("<tr><th scope=col>group</th><th scope=col>verdict</th><th scope=col>limited by"
            "</th><th scope=col>fidelity</th><th scope=col>bits per day</th>"
            "<th scope=col>stream bit/s</th><th scope=col>radio bit/s</th>"
            "<th scope=col>margin dB (required)</th><th scope=col>days</th>"
            "<th scope=col>files (failed)</th><th scope=col>frames below target</th></tr>")
    body = []
    for g in s["groups"]:
        margin = (f"{_f(g['margin_db'], '.1f')} ({_f(g['required_margin_db'], '.1f')})"
                  if g["margin_db"] is not None else "–")
        body.append(
            f"<tr><th scope=row>{escape(g['group'])}</th>{_verdict_cell(g)}"
            f"<td>{escape(_limit_text(g))}</td>"
            f"<td class=n>{_f(g['fidelity'], 'g')}</td>"
            f"<td class=n>{_f(g['bits_per_day'], ',.0f')}</td>"
            f"<td class=n>{_f(g['stream_bps'], '.3g')}</td>"
            f"<td class=n>{_f(g['data_rate_bps'], 'g')}</td>"
            f"<td class=n>{margin}</td><td class=n>{_f(g['days'], '.2f')}</td>"
            f"<td class=n>{g['files']} ({g['files_failed']})</td>"
            f"<td class=n>{g['frames_below_target']}</td></tr>")
    return (f'<table id="summary-table"><caption>Verdict per group: the highest fidelity '
            f"whose stream the group's link carries</caption><thead>{head}</thead>"
            f"<tbody>{''.join(body)}</tbody></table>")


def _bits_figure(s: dict) -> str:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    groups = [g for g in s["groups"] if g["bits_per_day"] is not None]
    if not groups:
        return ""
    fig, ax = plt.subplots(figsize=(8, 0.32 * len(groups) + 1.3))
    names = [g["group"] for g in groups]
    vals = [g["bits_per_day"] for g in groups]
    colours = ["#1f7a3d" if g["fits"] else "#b3261e" if g["fits"] is False else "#6b6b6b"
               for g in groups]
    hatches = ["" if g["fits"] else "//" for g in groups]
    bars = ax.barh(range(len(groups)), vals, color=colours, edgecolor="#1b1b1b")
    for bar, h in zip(bars, hatches):
        bar.set_hatch(h)
    ax.set_yticks(range(len(groups)), names)
    ax.invert_yaxis()
    ax.set_xlabel("bits per day at the chosen fidelity (lowest tried where none fits)")
    ax.grid(True, axis="x", alpha=0.3)
    for i, g in enumerate(groups):
        label = "fits" if g["fits"] else ("no verdict" if g["fits"] is None else "does not fit")
        ax.text(vals[i], i, f"  {label}", va="center", fontsize=8, color="#1b1b1b")
    ax.set_xlim(0, max(vals) * 1.25)
    fig.tight_layout()
    fits = sum(1 for g in groups if g["fits"])
    alt = (f"Horizontal bar chart of bits per day for {len(groups)} groups; {fits} fit their "
           "link (solid green bars) and the others do not (hatched red bars). "
           + "; ".join(f"{g['group']}: {g['bits_per_day']:,.0f} bits per day" for g in groups))
    return (f"<figure>{_svg_img(fig, alt)}<figcaption>Bits per day per group; hatched red: "
            "the link does not carry it.</figcaption></figure>")


def _classes_table(s: dict) -> str:
    rows = []
    for c in s["sensor_classes"]:
        rows.append(
            f"<tr><th scope=row>{escape(c['channel'])}</th><td>{escape(c['basis'])}</td>"
            f"<td class=n>{_f(c['fidelity'], 'g')}</td>"
            f"<td class=n>{_f(c['bits_per_day_per_station'], ',.0f')}</td>"
            f"<td class=n>{_f(c['bits_saved_percent'], '.1f')}</td>"
            f"<td class=n>{_f(c['snr_db_min'], '.1f')}</td>"
            f"<td class=n>{_f(c['max_abs_error'], '.3g')}</td>"
            f"<td class=n>{c['frames_below_target']}</td>"
            f"<td><code>{escape(s.get('profiles', {}).get(c['channel'], '–'))}</code></td></tr>")
    return ("<table><caption>Chosen profile per sensor class (fewest bits over the fleet at "
            f"fidelity {_f(s['fleet_fidelity'], 'g')})</caption><thead><tr><th scope=col>sensor "
            "class</th><th scope=col>basis</th><th scope=col>fidelity</th><th scope=col>bits "
            "per day per station</th><th scope=col>saved vs identity %</th><th scope=col>"
            "lowest SNR dB</th><th scope=col>largest |error|</th><th scope=col>frames below "
            "target</th><th scope=col>profile file (in the survey folder)</th></tr></thead>"
            f"<tbody>{''.join(rows)}</tbody></table>")


def _group_channel_table(s: dict) -> str:
    chosen = {g["group"]: (g["fidelity"] if g["fidelity"] is not None
                           else min(s["settings"]["fidelities"])) for g in s["groups"]}
    chans = list(dict.fromkeys(r["channel"] for r in s["group_channels"]))
    cell = {(r["group"], r["channel"]): r for r in s["group_channels"]
            if r["fidelity_target"] == chosen.get(r["group"])}
    head = "".join(f"<th scope=col>{escape(c)}</th>" for c in chans)
    body = []
    for g in s["groups"]:
        tds = []
        for c in chans:
            r = cell.get((g["group"], c))
            tds.append("<td class=n>–</td>" if r is None or r["bits_per_day"] is None else
                       f"<td class=n>{r['bits_per_day']:,.0f}<br><span class=small>"
                       f"{escape(r['basis'])}</span></td>")
        body.append(f"<tr><th scope=row>{escape(g['group'])}</th>"
                    f"<td class=n>{_f(chosen[g['group']], 'g')}</td>{''.join(tds)}</tr>")
    return ("<table><caption>Bits per day per channel at each group's chosen fidelity, with the "
            "best basis of that channel in that group</caption><thead><tr><th scope=col>group"
            f"</th><th scope=col>fidelity</th>{head}</tr></thead><tbody>{''.join(body)}</tbody>"
            "</table>")


def _curves_figure(s: dict) -> str:
    import matplotlib.pyplot as plt

    chans = list(dict.fromkeys(c["channel"] for c in s["curves"] if c["channel"] != "all"))
    if not chans:
        return ""
    bases = list(dict.fromkeys(c["basis"] for c in s["curves"]))
    cols = 3
    rows = -(-len(chans) // cols)
    fig, axes = plt.subplots(rows, cols, figsize=(9.5, 2.6 * rows), squeeze=False)
    for ax in axes.flat[len(chans):]:
        ax.set_visible(False)
    markers = "os^Dvp*h"
    for ax, ch in zip(axes.flat, chans):
        for c in s["curves"]:
            if c["channel"] != ch:
                continue
            k = bases.index(c["basis"])
            ax.plot(range(len(c["fidelity"])), c["bits_per_day"], marker=markers[k % 8],
                    color=_PALETTE[k % len(_PALETTE)], label=c["basis"], lw=1.4, ms=4)
            ax.set_xticks(range(len(c["fidelity"])), [f"{f:g}" for f in c["fidelity"]])
        ax.set_title(ch, fontsize=10)
        ax.set_xlabel("fidelity", fontsize=8)
        ax.set_ylabel("bits per station-day", fontsize=8)
        ax.tick_params(labelsize=8)
        ax.grid(True, alpha=0.3)
    handles, labels = axes.flat[0].get_legend_handles_labels()
    fig.legend(handles, labels, loc="lower center", ncol=len(labels), fontsize=9,
               frameon=False, bbox_to_anchor=(0.5, -0.02))
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    alt = ("Small multiples, one panel per sensor class (" + ", ".join(chans) + "): bits per "
           "station-day against the fidelity target for each basis (" + ", ".join(bases)
           + "); every curve rises with fidelity, and the identity basis is the costliest "
           "reference.")
    return (f"<figure>{_svg_img(fig, alt)}<figcaption>Rate against fidelity: bits per station "
            "and day, averaged over the fleet, for each basis.</figcaption></figure>")


def _examples_figure(s: dict) -> str:
    import matplotlib.pyplot as plt

    ex = s.get("examples") or []
    if not ex:
        return "<p>No reconstruction example: no file of the archive could be coded.</p>"
    parts = []
    for e in ex:
        fig, (a1, a2) = plt.subplots(2, 1, figsize=(9.5, 2.9), sharex=True,
                                     gridspec_kw={"height_ratios": [2, 1]})
        hours = [t / 3600.0 for t in e["time_s"]]
        a1.plot(hours, e["original"], color=_PALETTE[0], lw=1.6, label="original")
        a1.plot(hours, e["decoded"], color=_PALETTE[1], lw=1.0, ls="--", label="decoded")
        a1.set_ylabel(e["channel"], fontsize=8)
        a1.legend(fontsize=8, loc="upper right", frameon=False)
        a1.grid(True, alpha=0.3)
        err = [d - o for d, o in zip(e["decoded"], e["original"])]
        a2.plot(hours, err, color="#333333", lw=0.9)
        a2.axhline(0, color="#777777", lw=0.6)
        a2.set_ylabel("error", fontsize=8)
        a2.set_xlabel("hours from the start of the file", fontsize=8)
        a2.grid(True, alpha=0.3)
        for a in (a1, a2):
            a.tick_params(labelsize=8)
        fig.tight_layout()
        name = Path(e["file"]).name
        alt = (f"{e['channel']} from {name}: the original and the decoded trace "
               f"({e['basis']}, fidelity {e['fidelity']:g}) lie on top of each other; below, "
               f"the error, at most {e['max_abs_error']:.3g} in the channel's units "
               f"(sensor resolution {e['resolution']:g}).")
        parts.append(f"<figure>{_svg_img(fig, alt)}<figcaption>{escape(e['channel'])}: "
                     f"{escape(name)}, basis {escape(e['basis'])}, fidelity "
                     f"{e['fidelity']:g}; largest error {e['max_abs_error']:.3g}, SNR "
                     f"{_f(e['snr_db'], '.1f')} dB (whole file).</figcaption></figure>")
    return "".join(parts)


def _link_section(s: dict) -> str:
    links = s.get("links") or {}
    if not links:
        return ("<p>No link file was given (<code>--link</code> or <code>--links</code>), so "
                "no group has a verdict.</p>")
    rows = []
    for path, doc in links.items():
        f = doc["figures"]
        used = ", ".join(g["group"] for g in s["groups"] if g["link_file"] == path)
        rows.append(
            f"<tr><th scope=row>{escape(Path(path).name)}</th><td>{escape(used)}</td>"
            f"<td class=n>{_f(doc['distance_m'] / 1e3, '.1f')}</td>"
            f"<td class=n>{_f(f.get('fspl_db'), '.1f')}</td>"
            f"<td class=n>{_f(f.get('cn0_dbhz'), '.1f')}</td>"
            f"<td class=n>{_f(f.get('data_rate_bps'), 'g')}</td>"
            f"<td class=n>{_f(f.get('margin_db'), '.1f')}</td>"
            f"<td class=n>{_f(f.get('required_margin_db'), '.1f')}</td>"
            f"<td class=n>{_f(f.get('max_data_rate_bps'), '.3g')}</td></tr>")
    overview = ("<table><caption>Links: key figures of each link file</caption><thead><tr>"
                "<th scope=col>link file</th><th scope=col>groups</th><th scope=col>distance km"
                "</th><th scope=col>path loss dB</th><th scope=col>C/N0 dB-Hz</th>"
                "<th scope=col>data rate bit/s</th><th scope=col>margin dB</th>"
                "<th scope=col>required dB</th><th scope=col>max data rate bit/s</th></tr>"
                f"</thead><tbody>{''.join(rows)}</tbody></table>")
    worst_path = min(links, key=lambda p: links[p]["figures"].get("margin_db", 0.0))
    doc = links[worst_path]
    lines = "".join(
        f"<tr><td>{escape(line['item'])}</td><td class=n>{line['value']:.6g}</td>"
        f"<td>{escape(line['unit'])}</td><td>{escape(line['source'])}</td></tr>"
        for line in doc["lines"])
    full = (f"<table><caption>Budget of the link with the least margin, "
            f"{escape(Path(worst_path).name)} ({escape(doc['description'] or '')}), line by "
            "line with its formula or source</caption><thead><tr><th scope=col>item</th>"
            "<th scope=col>value</th><th scope=col>unit</th><th scope=col>formula or source"
            f"</th></tr></thead><tbody>{lines}</tbody></table>")
    rule = ("<p class=small>Limited by “none”: the highest fidelity tried fits. Verdict: a "
            "group fits at fidelity F when its stream's bits on air "
            "per second (bits per day / 86 400 / code rate) are within the radio's channel bit "
            "rate (data rate / code rate) and the radio's margin at its own data rate is at "
            "least the required margin; the chosen fidelity is the highest that fits.</p>")
    return overview + full + rule


def _errors_section(s: dict) -> str:
    if not s["errors"]:
        return "<p>Every file was coded.</p>"
    rows = "".join(f"<tr><td>{escape(e['file'])}</td><td>{escape(e['group'] or '')}</td>"
                   f"<td>{escape(e['error'])}</td></tr>" for e in s["errors"])
    return ("<table><caption>Files that failed (left out of every figure above)</caption>"
            "<thead><tr><th scope=col>file</th><th scope=col>group</th><th scope=col>reason"
            f"</th></tr></thead><tbody>{rows}</tbody></table>")


def render_report(s: dict) -> str:
    """The page, as one HTML5 string."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    groups = s["groups"]
    fits = sum(1 for g in groups if g["fits"])
    judged = sum(1 for g in groups if g["fits"] is not None)
    days = sum(g["days"] for g in groups)
    tiles = "".join(f'<div class="tile"><b>{v}</b>{escape(k)}</div>' for k, v in (
        ("groups that fit", f"{fits} / {judged}" if judged else "–"),
        ("files surveyed", s["files"]), ("files failed", s["files_failed"]),
        ("station-days", f"{days:.1f}"),
        ("fleet fidelity", _f(s["fleet_fidelity"], "g"))))
    st = s["settings"]
    method = ("<p class=small>Every file went through the real encoder and decoder for each "
              f"basis ({escape(', '.join(st['bases']))}) at each fidelity target "
              f"({', '.join(f'{f:g}' for f in st['fidelities'])}); every frame's error budget "
              "was checked on the decoded samples (frames below target are counted). Bits "
              "count every header and CRC. Bits per day = coded bits / recording duration x "
              "86 400 s; a group's stream at a fidelity uses, for each channel, the basis with "
              "the fewest bits over that group's files.</p>")
    missing = (f"<p class=caution>{s['missing']} files of the archive have no result yet "
               "(the survey was interrupted); finish it with --resume.</p>"
               if s.get("missing") else "")
    cautions = "".join(f'<p class="caution">{escape(c)}</p>' for c in s["cautions"])
    with plt.rc_context({"font.family": "DejaVu Sans", "svg.hashsalt": "coefwire",
                         "svg.fonttype": "path"}):
        body = (
            "<header><h1>Fleet survey</h1>"
            f"<p class=lead>{len(groups)} groups, {s['files']} files"
            f"{(' — pattern ' + escape(st['group_by'])) if st.get('group_by') else ''}. "
            "Coded with coefwire; every figure below was measured on decoded samples.</p>"
            f'<div class="tiles">{tiles}</div></header>'
            f"{missing}"
            '<section aria-labelledby="s-verdict"><h2 id="s-verdict">Verdict per group</h2>'
            f"{_summary_table(s)}{_bits_figure(s)}</section>"
            '<section aria-labelledby="s-profile"><h2 id="s-profile">Chosen profile per sensor '
            f"class</h2>{_classes_table(s)}{method}</section>"
            '<section aria-labelledby="s-bits"><h2 id="s-bits">Bits per day per group and '
            f"channel</h2>{_group_channel_table(s)}</section>"
            '<section aria-labelledby="s-curves"><h2 id="s-curves">Rate against fidelity</h2>'
            f"{_curves_figure(s)}</section>"
            '<section aria-labelledby="s-examples"><h2 id="s-examples">Reconstruction, one '
            f"example per sensor class</h2>{_examples_figure(s)}</section>"
            '<section aria-labelledby="s-link"><h2 id="s-link">Link budget</h2>'
            f"{_link_section(s)}</section>"
            '<section aria-labelledby="s-errors"><h2 id="s-errors">Files that failed</h2>'
            f"{_errors_section(s)}</section>"
            '<section aria-labelledby="s-cautions"><h2 id="s-cautions">Cautions</h2>'
            f"{cautions}</section>")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
            f"<title>Fleet survey</title><style>{_CSS}</style></head><body><main>{body}</main>"
            "</body></html>\n")
