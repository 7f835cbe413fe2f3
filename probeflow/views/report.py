"""The self-contained HTML report: per probe a plot (PNG as a data URI) and a summary table.

Summary figures are marked up with ``data-figure`` attributes (``time-in-band``,
``alarms``, ``chattering``) so they can be read back by a program.
"""

from __future__ import annotations

import base64
import html
import math
import sqlite3
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from tqdm import tqdm

from probeflow.errors import ProbeflowError
from probeflow.views.probedata import ProbeData, load_probe_data
from probeflow.views.summary import DEFAULT_CHATTER_S, DEFAULT_MAX_HOLD_S
from probeflow.views.text import CAUTION, fixed, format_age, signed, utc_text

__all__ = ["ReportSettings", "build_report", "render_html", "safe_file_name"]


@dataclass(frozen=True)
class ReportSettings:
    site: str
    since: float
    until: float
    probes: Sequence[str]
    rules: Any = None
    slope_limit_pct: float = 90.0
    chatter_s: float = DEFAULT_CHATTER_S
    png_dir: Path | None = None
    progress: bool = False
    config_calibrations: dict[str, tuple[float, float]] | None = None  # probe -> (slope %, offset mV)
    max_span_rows: int = 40

    def calibration_text(self, data: ProbeData) -> str:
        """The calibration health line, falling back to a calibration fixed in the config."""
        fixed_cal = (self.config_calibrations or {}).get(data.probe)
        if data.health.last_accepted is None and fixed_cal is not None:
            return (f"none in the store; the config fixes slope {fixed_cal[0]:.1f} %, "
                    f"offset {fixed_cal[1]:+.1f} mV")
        return data.health.describe()

    @property
    def max_hold_s(self) -> float:
        diag = getattr(self.rules, "diagnostics", None)
        return float(diag.stale.after_s) if diag is not None else DEFAULT_MAX_HOLD_S


def safe_file_name(probe: str) -> str:
    """A probe id as a file name (ids may contain ``/`` and ``:``)."""
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in probe)


def build_report(con: sqlite3.Connection, settings: ReportSettings) -> tuple[str, list[ProbeData]]:
    """Read the store, draw one figure per probe, and return the HTML and the data shown."""
    try:  # matplotlib only when a report is made
        from probeflow.views.plot import probe_figure_png
    except ImportError as exc:
        raise ProbeflowError(f"the report needs matplotlib ({exc}); install it with "
                             "pip install 'probeflow[report]'") from exc

    datas: list[ProbeData] = []
    pngs: list[bytes] = []
    if settings.png_dir is not None:
        settings.png_dir.mkdir(parents=True, exist_ok=True)
    for probe in tqdm(settings.probes, desc="report", unit="probe", disable=None if settings.progress else True):
        data = load_probe_data(con, probe, settings.since, settings.until, settings.rules,
                               settings.max_hold_s, settings.slope_limit_pct, settings.chatter_s)
        png = probe_figure_png(data, settings.site)
        if settings.png_dir is not None:
            (settings.png_dir / f"{safe_file_name(probe)}.png").write_bytes(png)
        datas.append(data)
        pngs.append(png)
    return render_html(settings, datas, pngs), datas


STYLE = """
body { font-family: "DejaVu Sans", Arial, sans-serif; margin: 1.5em auto; max-width: 1250px;
       color: #222; }
h1 { font-size: 1.5em; margin-bottom: 0.2em; }
h2 { font-size: 1.2em; margin-top: 2em; border-bottom: 2px solid #08519c; }
.caution { border: 2px solid #b2182b; background: #fff5f0; padding: 0.6em 0.9em; margin: 1em 0; }
table { border-collapse: collapse; margin: 0.6em 0 1em; font-size: 0.92em; }
th, td { border: 1px solid #bbb; padding: 0.25em 0.6em; text-align: left; vertical-align: top; }
th { background: #f0f0f0; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
img { max-width: 100%; border: 1px solid #ddd; }
.note { color: #555; font-size: 0.9em; }
"""


def _e(text: object) -> str:
    return html.escape(str(text), quote=True)


def _pct(value: float) -> str:
    return "no data" if not math.isfinite(value) else f"{value:.2f}"


def _overview(datas: Sequence[ProbeData], settings: ReportSettings) -> str:
    rows = []
    for d in datas:
        bands = "<br>".join(f"{_e(bt.band.rule)}: {_pct(bt.pct)}" + (" %" if math.isfinite(bt.pct) else "")
                            for bt in d.band_times) or "no band"
        rows.append(
            f"<tr><td><a href='#probe-{_e(safe_file_name(d.probe))}'>{_e(d.probe)}</a></td>"
            f"<td class='num'>{len(d.readings)}</td><td class='num'>{_pct(d.good_fraction_pct)}</td>"
            f"<td>{bands}</td><td class='num'>{sum(d.alarms_by_rule.values())}</td>"
            f"<td class='num'>{d.chattering}</td><td>{_e(settings.calibration_text(d))}</td></tr>")
    return ("<table><tr><th>probe</th><th>readings</th><th>quality good (%)</th>"
            "<th>time within band (%)</th><th>alarms raised</th><th>chattering alarms</th>"
            "<th>last calibration</th></tr>" + "".join(rows) + "</table>")


def _probe_section(d: ProbeData, png: bytes, settings: ReportSettings) -> str:
    pid = _e(d.probe)
    uri = "data:image/png;base64," + base64.b64encode(png).decode("ascii")
    parts = [f"<h2 id='probe-{_e(safe_file_name(d.probe))}'>{_e(settings.site)}: probe {pid}</h2>",
             f"<img src='{uri}' alt='pH, alarm bands, neutral pH and temperature of probe {pid}'>"]
    # time within band
    rows = "".join(
        f"<tr><td>{_e(bt.band.rule)}</td><td>{_e(bt.band.describe())}</td>"
        f"<td class='num' data-figure='time-in-band' data-probe='{pid}' data-rule='{_e(bt.band.rule)}'>"
        f"{_pct(bt.pct)}</td></tr>" for bt in d.band_times)
    parts.append("<h3>Time within band</h3>" + (
        "<table><tr><th>rule</th><th>band</th><th>time within band (%)</th></tr>" + rows + "</table>"
        if rows else "<p class='note'>No band rule applies to this probe.</p>"))
    # alarms
    rules = sorted(set(d.alarms_by_rule) | set(d.chattering_by_rule))
    rows = "".join(
        f"<tr><td>{_e(rule)}</td>"
        f"<td class='num' data-figure='alarms' data-probe='{pid}' data-rule='{_e(rule)}'>"
        f"{d.alarms_by_rule.get(rule, 0)}</td>"
        f"<td class='num' data-figure='chattering' data-probe='{pid}' data-rule='{_e(rule)}'>"
        f"{d.chattering_by_rule.get(rule, 0)}</td></tr>" for rule in rules)
    parts.append(
        "<h3>Alarms</h3>"
        f"<p>Chattering alarms (raised again within {settings.chatter_s:g} s of clearing): "
        f"<strong data-figure='chattering-total' data-probe='{pid}'>{d.chattering}</strong></p>"
        + ("<table><tr><th>rule</th><th>alarms raised</th><th>of which chattering</th></tr>"
           + rows + "</table>" if rows else "<p class='note'>No alarm was raised in this period.</p>"))
    if d.spans:
        span_rows = "".join(
            f"<tr><td>{_e(s.rule)}</td><td>{_e(s.limit)}</td><td>{_e(s.severity)}</td>"
            f"<td>{utc_text(s.start)}</td>"
            f"<td>{'still active' if s.open_end else utc_text(s.end)}</td>"
            f"<td class='num'>{format_age(s.end - s.start)}</td></tr>"
            for s in d.spans[:settings.max_span_rows])
        more = len(d.spans) - settings.max_span_rows
        parts.append("<table><tr><th>rule</th><th>limit</th><th>severity</th><th>active from</th>"
                     "<th>to</th><th>for</th></tr>" + span_rows + "</table>"
                     + (f"<p class='note'>... and {more} more alarm spans (see the plot).</p>"
                        if more > 0 else ""))
    # calibration and grab samples
    h = d.health
    parts.append(
        "<h3>Calibration health</h3><table>"
        f"<tr><th>last accepted calibration</th><td>{_e(settings.calibration_text(d))}</td></tr>"
        f"<tr><th>calibrations in this period</th><td>{h.count_in_period}</td></tr>"
        f"<tr><th>slope-limit forecast ({settings.slope_limit_pct:g} %)</th>"
        f"<td>{_e(h.forecast)}</td></tr></table>")
    if d.grabs:
        g_rows = "".join(
            f"<tr><td>{utc_text(float(g['ts']))}</td><td class='num'>{fixed(g['lab_ph'], 2)}</td>"
            f"<td class='num'>{fixed(g.get('online_ph'), 2)}</td>"
            f"<td class='num'>{signed(g.get('difference'), 2)}</td>"
            f"<td>{'yes' if g.get('applied') else 'no'}</td></tr>" for g in d.grabs)
        parts.append("<h3>Grab samples</h3><table><tr><th>time</th><th>lab pH</th>"
                     "<th>online pH</th><th>online - lab (pH)</th><th>offset applied</th></tr>"
                     + g_rows + "</table>")
    return "\n".join(parts)


def render_html(settings: ReportSettings, datas: Sequence[ProbeData], pngs: Sequence[bytes]) -> str:
    title = (f"{settings.site}: pH report {utc_text(settings.since, seconds=False)} to "
             f"{utc_text(settings.until, seconds=False)}")
    sections = "\n".join(_probe_section(d, p, settings) for d, p in zip(datas, pngs, strict=True))
    caution = f"<p class='caution'><strong>{_e(CAUTION)}</strong></p>"
    notes = (
        "<p class='note'>Time within band: share of the time covered by good-quality readings "
        "during which the value was within the band rule's inner limits (a value exactly at a "
        "limit counts as within). Each reading stands until the next one, at most "
        f"{settings.max_hold_s:g} s; longer gaps count as no data. Alarms raised: alarm "
        "activations (raise events) in the period. Neutral pH: pKw/2 at the measured "
        "temperature. Times are UTC.</p>")
    return (f"<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'><title>{_e(title)}</title>"
            f"<style>{STYLE}</style></head><body>\n<h1>{_e(title)}</h1>\n{caution}\n"
            f"<p>Generated {utc_text(time.time())} from the probeflow SQLite store. "
            f"{len(datas)} probe(s).</p>\n{_overview(datas, settings)}\n{notes}\n{sections}\n{caution}\n"
            "</body></html>\n")

