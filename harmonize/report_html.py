"""Render a unit-consistency check as ONE self-contained HTML file a reviewer can open offline.

The page holds the findings table, one plot per trait (values by group on a log scale, or on
the Celsius scale for temperatures, with groups suspected of a unit error in red), and the
accounting of rows. Plots are drawn with matplotlib as inline SVG: no JavaScript, no fonts or
images fetched from anywhere, text kept as text so the page stays searchable.

Left to others: finding anything (`harmonize.check`), reading inputs (`harmonize.check_sources`),
writing the file to disk and printing (`harmonize.cli.check_cmd`).
"""

from __future__ import annotations

import html
import io

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter, NullFormatter

from harmonize.check import CheckResult, Finding

MAX_GROUPS_DRAWN = 30  # more rows make an unreadable plot; the rest are named under it
MAX_POINTS_PER_GROUP = 150  # a sample of points over the box; boxes use every value
FLAG_COLOUR = "#c0392b"
PLAIN_COLOUR = "#34648c"

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:2rem auto;max-width:72rem;
color:#1d2327;line-height:1.4;padding:0 1rem}
h1{font-size:1.6rem;margin-bottom:.2rem}h2{margin-top:2.2rem;border-bottom:1px solid #ccd;
padding-bottom:.2rem}.lead{color:#555}
table{border-collapse:collapse;width:100%;font-size:.88rem;margin:.6rem 0}
th,td{border:1px solid #d5d9de;padding:.3rem .5rem;text-align:left;vertical-align:top}
th{background:#eef1f4}td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.error td{background:#fbe9e7}tr.warning td{background:#fff6e0}tr.note td{background:#f3f6f9}
.badge{display:inline-block;padding:.1rem .55rem;border-radius:.8rem;font-weight:600;
margin-right:.4rem;font-size:.85rem}.badge.error{background:#f4c7c0}.badge.warning{background:#fde3a7}
.badge.note{background:#dfe7ef}.badge.ok{background:#cdebd3}
figure{margin:.8rem 0}figure svg{max-width:100%;height:auto}figcaption{color:#555;font-size:.85rem}
"""


def _svg(figure: Figure) -> str:
    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.fonttype": "none"}):  # text stays text, no embedded glyphs
        figure.savefig(buffer, format="svg", metadata={"Date": None}, bbox_inches="tight")
    text = buffer.getvalue()
    return text[text.index("<svg") :]  # drop the XML prolog and DOCTYPE: inline SVG needs neither


def _groups_to_draw(values: pd.DataFrame, flagged: set[str]) -> tuple[list[str], int]:
    counts = values.groupby("group").size().sort_values(ascending=False)
    chosen = [g for g in counts.index if g in flagged]
    chosen += [g for g in counts.index if g not in flagged][
        : max(0, MAX_GROUPS_DRAWN - len(chosen))
    ]
    return sorted(chosen), len(counts) - len(chosen)


def trait_plot(result: CheckResult, trait: str) -> tuple[str, int]:
    """SVG of one trait's values by group, and how many groups were left out of it."""
    values = result.observations[result.observations["trait"] == trait]
    info = result.traits[trait]
    celsius = info.celsius is not None
    level = values["value"].to_numpy(np.float64)
    if celsius:
        level = level * info.celsius[0] + info.celsius[1]
    else:
        level = np.where(level > 0, level, np.nan)  # a log axis cannot show zero or less
    frame = pd.DataFrame({"group": values["group"].to_numpy(), "level": level})
    frame = frame.dropna()
    flagged = set(values.loc[values["flagged"], "group"])
    groups, left_out = _groups_to_draw(frame, flagged)
    figure = Figure(figsize=(8.5, 0.45 * len(groups) + 1.4))
    axes = figure.subplots()
    rng = np.random.default_rng(0)  # a fixed sample, so the same data draw the same picture
    by_group = dict(tuple(frame.groupby("group")))
    for position, group in enumerate(groups):
        data = by_group[group]["level"].to_numpy() if group in by_group else np.array([])
        if data.size == 0:
            continue
        colour = FLAG_COLOUR if group in flagged else PLAIN_COLOUR
        axes.boxplot(
            data, positions=[position], orientation="horizontal", widths=0.6, showfliers=False,
            patch_artist=True, boxprops={"facecolor": colour + "33", "edgecolor": colour},
            medianprops={"color": colour, "linewidth": 2}, whiskerprops={"color": colour},
            capprops={"color": colour},
        )  # fmt: skip
        sample = (
            data
            if data.size <= MAX_POINTS_PER_GROUP
            else rng.choice(data, MAX_POINTS_PER_GROUP, replace=False)
        )
        jitter = rng.uniform(-0.18, 0.18, sample.size)
        axes.scatter(sample, position + jitter, s=6, color=colour, alpha=0.45, linewidths=0)
    axes.set_yticks(range(len(groups)))
    axes.set_yticklabels(
        [("! " if g in flagged else "") + (g if len(g) <= 40 else g[:37] + "…") for g in groups]
    )
    for label, group in zip(axes.get_yticklabels(), groups, strict=True):
        if group in flagged:
            label.set_color(FLAG_COLOUR)
    if not celsius:
        axes.set_xscale("log")
        plain = FuncFormatter(lambda value, _: f"{value:g}")  # '20' reads better than '2×10¹'
        axes.xaxis.set_major_formatter(plain)
        low, high = axes.get_xlim()
        # less than a decade shown: no major tick falls inside, so label the minor ticks instead
        narrow = high / low < 10 if low > 0 else False
        axes.xaxis.set_minor_formatter(plain if narrow else NullFormatter())
    axes.set_xlabel(f"{trait} ({'°C' if celsius else info.unit}{'' if celsius else ', log scale'})")
    axes.grid(axis="x", color="#dde", linewidth=0.6)
    axes.set_axisbelow(True)
    axes.set_title(trait, loc="left", fontsize=11)
    figure.set_layout_engine("constrained")
    return _svg(figure), left_out


def _cell(value: object) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    return html.escape(f"{value:g}" if isinstance(value, float) else str(value))


def _findings_table(findings: tuple[Finding, ...]) -> str:
    if not findings:
        return '<p id="no-findings"><span class="badge ok">no findings</span> nothing to flag.</p>'
    head = (
        "<tr><th>severity</th><th>finding</th><th>trait</th><th>group</th><th>values</th>"
        "<th>factor</th><th>confidence</th><th>evidence</th></tr>"
    )
    rows = [
        f'<tr class="{html.escape(f.severity)}"><td>{_cell(f.severity)}</td><td>{_cell(f.kind)}</td>'
        f"<td>{_cell(f.trait)}</td><td>{_cell(f.group)}</td><td class=num>{f.values}</td>"
        f"<td>{_cell(f.factor)}</td><td class=num>{_cell(f.confidence)}</td>"
        f"<td>{_cell(f.message)}</td></tr>"
        for f in findings
    ]
    return f'<table id="findings">{head}{"".join(rows)}</table>'


def _accounting_table(result: CheckResult) -> str:
    rows = "".join(
        f"<tr><td>{html.escape(what)}</td><td class=num>{count}</td></tr>"
        for what, count in result.accounting.lines
    )
    state = "yes" if result.accounting.balanced else "NO"
    return (
        f'<table id="accounting"><tr><th>rows and cells</th><th>count</th></tr>{rows}'
        f"<tr><th>adds up</th><th>{state}</th></tr></table>"
    )


def render_report(result: CheckResult, title: str = "Unit-consistency check") -> str:
    """The whole page as one string (UTF-8 HTML, nothing referenced outside it)."""
    counts = pd.Series([f.severity for f in result.findings], dtype=object).value_counts()
    badges = "".join(
        f'<span class="badge {s}">{counts.get(s, 0)} {s}{"s" if counts.get(s, 0) != 1 else ""}</span>'
        for s in ("error", "warning", "note")
    )
    sections = []
    for trait in sorted(result.traits):
        if not (result.observations["trait"] == trait).any():
            continue
        svg, left_out = trait_plot(result, trait)
        suspects = [f for f in result.findings if f.trait == trait and f.factor]
        caption = (
            "Red: groups suspected of a unit error ("
            + "; ".join(
                html.escape(f"{f.group}: {f.factor}, confidence {f.confidence}") for f in suspects
            )
            + ")."
            if suspects
            else "No group of this trait is suspected of a unit error."
        )
        if left_out:
            caption += f" {left_out} smaller groups not drawn."
        sections.append(
            f'<section class="trait"><h3>{html.escape(trait)}</h3><figure>{svg}'
            f"<figcaption>{caption} Boxes: quartiles and median of all values; dots: a sample "
            f"of up to {MAX_POINTS_PER_GROUP} values per group.</figcaption></figure></section>"
        )
    return (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{html.escape(title)}</title><style>{_CSS}</style></head><body>"
        f"<h1>{html.escape(title)}</h1>"
        f'<p class="lead">{html.escape(result.subject)} &middot; grouped by '
        f"{html.escape(result.group_by)} &middot; the check only flags; it changed no value.</p>"
        f"<p>{badges}</p><h2>Findings</h2>{_findings_table(result.findings)}"
        f"<h2>Values by {html.escape(result.group_by)}</h2>{''.join(sections) or '<p>No numeric values.</p>'}"
        f"<h2>Accounting of rows</h2>{_accounting_table(result)}</body></html>"
    )
