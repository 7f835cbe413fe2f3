"""One figure per probe: pH with its alarm bands and the neutral line, temperature below.

Headless (matplotlib's Agg backend); the figure comes back as PNG bytes.
Long periods are thinned for drawing only (the minimum and maximum of each
time bin are kept, so no excursion disappears); the summary figures always
use every reading.
"""

from __future__ import annotations

import io
import textwrap
from datetime import UTC
from typing import Any

import matplotlib

matplotlib.use("Agg")

import matplotlib.dates as mdates
import matplotlib.pyplot as plt
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from probeflow.views.probedata import ProbeData
from probeflow.views.summary import BandLimits, good_mask
from probeflow.views.text import utc_text

__all__ = ["probe_figure_png", "thin_for_drawing"]

MAX_DRAWN_POINTS = 6000
SEVERITY_COLOURS = {"critical": "#b2182b", "high": "#d6604d", "medium": "#f4a582", "low": "#fddbc7"}
LIMIT_STYLES: dict[str, tuple[str, Any]] = {"low_low": ("#b2182b", "-"), "low": ("#e08214", "--"),
                "high": ("#e08214", "--"), "high_high": ("#b2182b", "-")}
LIMIT_TEXT = {"low_low": "low-low", "low": "low", "high": "high", "high_high": "high-high"}


def _dates(ts: np.ndarray) -> np.ndarray:
    """Epoch seconds to matplotlib date numbers (days since 1970-01-01 UTC)."""
    return np.asarray(ts, dtype=np.float64) / 86400.0


def _break_gaps(ts: np.ndarray, values: np.ndarray, max_gap_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Insert a NaN after every gap longer than ``max_gap_s`` so the line is not drawn across it."""
    if ts.size < 2:
        return ts, values
    gaps = np.flatnonzero(np.diff(ts) > max_gap_s)
    if gaps.size == 0:
        return ts, values
    return (np.insert(ts, gaps + 1, ts[gaps] + max_gap_s / 2.0),
            np.insert(values, gaps + 1, np.nan))


def thin_for_drawing(ts: np.ndarray, values: np.ndarray,
                     max_points: int = MAX_DRAWN_POINTS) -> tuple[np.ndarray, np.ndarray]:
    """At most about ``max_points`` points: each time bin's minimum and maximum, in time order.

    A bin without a finite value gives one NaN, which keeps gaps visible.
    """
    n = ts.size
    if n <= max_points:
        return ts, values
    bins = max_points // 2
    edges = np.linspace(ts[0], ts[-1], bins + 1)
    idx = np.clip(np.searchsorted(edges, ts, side="right") - 1, 0, bins - 1)
    finite = np.isfinite(values)
    out_t: list[np.ndarray] = []
    out_v: list[np.ndarray] = []
    starts = np.searchsorted(idx, np.arange(bins), side="left")
    ends = np.searchsorted(idx, np.arange(bins), side="right")
    for b in range(bins):
        s, e = starts[b], ends[b]
        if s == e:
            continue
        seg_ok = finite[s:e]
        if not seg_ok.any():
            out_t.append(np.array([ts[s]]))
            out_v.append(np.array([np.nan]))
            continue
        seg = np.where(seg_ok, values[s:e], np.nan)
        i_min, i_max = int(np.nanargmin(seg)), int(np.nanargmax(seg))
        pick = sorted({i_min, i_max})
        out_t.append(ts[s:e][pick])
        out_v.append(values[s:e][pick])
    return np.concatenate(out_t), np.concatenate(out_v)


def _draw_bands(ax: plt.Axes, bands: list[BandLimits], quantity: str, x: np.ndarray,
                neutral: np.ndarray | None, x_text: float) -> list[Line2D]:
    handles = []
    for band in bands:
        for name, value in band.limits():
            colour, style = LIMIT_STYLES[name]
            label = f"{band.rule} {LIMIT_TEXT[name]}"
            if band.quantity == quantity:
                ax.axhline(value, color=colour, linestyle=style, linewidth=1.2)
                ax.annotate(f"{label} {value:.2f}", (x_text, value), xycoords=("axes fraction", "data"),
                            xytext=(3, 0), textcoords="offset points", va="center", fontsize=8,
                            color=colour, annotation_clip=False)
            elif band.quantity == "neutral_dev" and quantity == "ph" and neutral is not None:
                ax.plot(x, neutral + value, color=colour, linestyle=style, linewidth=1.0)
                finite = np.flatnonzero(np.isfinite(neutral))
                if finite.size:
                    ax.annotate(f"{label}: neutral {value:+.2f}", (x_text, neutral[finite[-1]] + value),
                                xycoords=("axes fraction", "data"), xytext=(3, 0),
                                textcoords="offset points", va="center", fontsize=8, color=colour,
                                annotation_clip=False)
            else:
                continue
            pair = "low and high" if name in ("low", "high") else "low-low and high-high"
            handles.append(Line2D([], [], color=colour, linestyle=style,
                                  label=f"{pair} limits" if band.quantity != "neutral_dev"
                                  else f"{pair} limits (relative to neutral pH)"))
    return handles


def probe_figure_png(data: ProbeData, site: str, dpi: int = 100) -> bytes:
    """The probe's figure as PNG bytes."""
    r = data.readings
    ts = r["ts"].to_numpy()
    good = good_mask(r["quality"])
    gap = data.max_hold_s
    ph = np.where(good, r["ph"].to_numpy(), np.nan)
    t_ph, v_ph = thin_for_drawing(*_break_gaps(ts, ph, gap))
    t_nt, v_nt = thin_for_drawing(*_break_gaps(ts, r["neutral_ph"].to_numpy(), gap))
    t_tc, v_tc = thin_for_drawing(*_break_gaps(ts, r["temp_c"].to_numpy(), gap))

    lanes = sorted({s.alarm_id for s in data.spans},
                   key=lambda a: min(s.start for s in data.spans if s.alarm_id == a))
    lane_h = max(0.7, 0.36 * len(lanes) + 0.3)
    fig, (ax, axa, axt) = plt.subplots(
        3, 1, sharex=True, figsize=(12, 7.4 + lane_h), dpi=dpi,
        gridspec_kw={"height_ratios": [3.2, lane_h, 1.3], "hspace": 0.12})
    height = 7.4 + lane_h
    fig.subplots_adjust(left=0.13, right=0.80, top=1 - 0.75 / height, bottom=1.25 / height)
    fig.suptitle(f"{site} - probe {data.probe}", fontsize=14, fontweight="bold", x=0.13, ha="left")
    counts = r["quality"][~good].value_counts()
    not_good = ", ".join(f"{name} {n}" for name, n in counts.items())
    ax.set_title(f"{utc_text(data.since, seconds=False)} to {utc_text(data.until, seconds=False)}"
                 f"   ({len(r)} readings" + (f"; quality not good: {not_good}" if not_good else "")
                 + ")", fontsize=10, loc="left")
    handles: list[object] = []

    # alarm lanes (one row per alarm), and shading of pH / temperature alarms on their panel
    severities_seen: list[str] = []
    x_lo, x_hi = _dates(np.array([data.since, data.until]))
    for span in data.spans:
        colour = SEVERITY_COLOURS.get(span.severity, SEVERITY_COLOURS["medium"])
        lane = lanes.index(span.alarm_id)
        x0, x1 = span.start / 86400.0, span.end / 86400.0
        axa.broken_barh([(x0, max(x1 - x0, (x_hi - x_lo) * 0.002))], (lane - 0.38, 0.76),
                        facecolors=colour, edgecolors="#67001f", linewidth=0.5)
        quantity = _span_quantity(data, span.alarm_id)
        target = ax if quantity in ("ph", "neutral_dev") else axt if quantity == "temp_c" else None
        if target is not None:
            target.axvspan(x0, x1, color=colour, alpha=0.30, linewidth=0)
        if span.severity not in severities_seen:
            severities_seen.append(span.severity)
    for sev in sorted(severities_seen, key=lambda s: list(SEVERITY_COLOURS).index(s)
                      if s in SEVERITY_COLOURS else 9):
        handles.append(Patch(facecolor=SEVERITY_COLOURS.get(sev, SEVERITY_COLOURS["medium"]),
                             edgecolor="#67001f", label=f"alarm active, {sev} severity"))
    if data.chattering_events:
        cx = np.array([t for _, _, t in data.chattering_events]) / 86400.0
        cy = np.array([lanes.index(a) for a, _, _ in data.chattering_events]) - 0.38
        handles.append(axa.scatter(cx, cy, marker="v", s=22, color="black", zorder=4,
                                   label="chattering: raised again within "
                                         f"{data.chatter_s:g} s of clearing"))
    axa.set_ylim(len(lanes) - 0.5 if lanes else 0.5, -0.5)
    axa.set_yticks(range(len(lanes)))
    axa.set_yticklabels([_lane_label(a) for a in lanes], fontsize=7.5, linespacing=0.95)
    axa.set_title("alarm activity (one row per alarm)", fontsize=9, loc="left", pad=3)
    axa.grid(True, axis="x", color="#d9d9d9", linewidth=0.6)
    if not lanes:
        axa.set_yticks([])
        axa.text(0.5, 0.5, "no alarm active in this period", transform=axa.transAxes,
                 ha="center", va="center", fontsize=9, color="#636363")

    # pH, neutral line, bands
    handles += ax.plot(_dates(t_ph), v_ph, color="#08519c", linewidth=1.1, label="pH (quality good)")
    bad = ~good & np.isfinite(r["ph"].to_numpy())
    if bad.any():
        bt, bv = thin_for_drawing(ts[bad], r["ph"].to_numpy()[bad])
        handles.append(ax.scatter(_dates(bt), bv, s=4, color="#969696", zorder=3,
                                  label="pH, quality not good (not counted in time within band)"))
    handles += ax.plot(_dates(t_nt), v_nt, color="#238b45", linewidth=1.0, linestyle=(0, (5, 2)),
                       label="neutral pH at measured temperature")
    neutral_full = r["neutral_ph"].to_numpy()
    neutral_for_bands = None
    band_x = _dates(ts)
    if any(b.quantity == "neutral_dev" for b in data.bands):
        bx, bn = thin_for_drawing(*_break_gaps(ts, neutral_full, gap))
        band_x, neutral_for_bands = _dates(bx), bn
    handles += _draw_bands(ax, data.bands, "ph", band_x, neutral_for_bands, 1.0)

    # calibration and grab-sample markers
    cal_seen: set[str] = set()
    for cal in data.calibrations:
        ok = cal.get("verdict") == "accepted"
        colour = "#1b7837" if ok else "#c51b7d"
        for a in (ax, axt):
            a.axvline(float(cal["ts"]) / 86400.0, color=colour, linestyle=":", linewidth=1.5)
        ax.annotate("CAL" if ok else "CAL rejected", (float(cal["ts"]) / 86400.0, 0.0),
                    xycoords=("data", "axes fraction"), xytext=(2, 3), textcoords="offset points",
                    fontsize=7, color=colour, rotation=90, va="bottom")
        key = "accepted" if ok else "rejected"
        if key not in cal_seen:
            cal_seen.add(key)
            handles.append(Line2D([], [], color=colour, linestyle=":", linewidth=1.5,
                                  label=f"calibration {key}"))
    if data.grabs:
        gt = np.array([float(g["ts"]) for g in data.grabs])
        gv = np.array([float(g["lab_ph"]) for g in data.grabs])
        handles.append(ax.scatter(_dates(gt), gv, marker="D", s=40, color="#ffd92f",
                                  edgecolor="black", zorder=5, label="grab sample, lab pH"))

    ax.set_ylabel("pH")
    if not any(b.quantity in ("ph", "neutral_dev") for b in data.bands):
        ax.text(0.01, 0.02, "no pH alarm band applies to this probe", transform=ax.transAxes,
                fontsize=8, color="#636363")
    ax.grid(True, color="#d9d9d9", linewidth=0.6)
    ax.set_xlim(x_lo, x_hi)
    _pad_limits(ax, data.bands)

    # temperature panel
    axt.plot(_dates(t_tc), v_tc, color="#6a3d9a", linewidth=1.0)
    handles.append(Line2D([], [], color="#6a3d9a", label="temperature (lower panel)"))
    handles += _draw_bands(axt, data.bands, "temp_c", _dates(ts), None, 1.0)
    axt.set_ylabel("temperature (°C)")
    finite_t = r["temp_c"].to_numpy()[np.isfinite(r["temp_c"].to_numpy())]
    if finite_t.size > 1 and float(finite_t.min()) == float(finite_t.max()):
        axt.text(0.01, 0.06, f"constant {finite_t[0]:.1f} °C: a fixed temperature from the config "
                 "(no sensor), or a stuck sensor", transform=axt.transAxes, fontsize=8,
                 color="#636363")
    axt.grid(True, color="#d9d9d9", linewidth=0.6)
    locator = mdates.AutoDateLocator(minticks=5, maxticks=12, tz=UTC)
    axt.xaxis.set_major_locator(locator)
    axt.xaxis.set_major_formatter(mdates.ConciseDateFormatter(
        locator, tz=UTC, show_offset=False,
        formats=["%Y", "%b %Y", "%d %b", "%H:%M", "%H:%M", "%H:%M:%S"],
        zero_formats=["", "%Y", "%b", "%d %b", "%H:%M", "%H:%M"]))
    axt.set_xlabel("time (UTC)")

    for x0, x1 in unusable_spans(ts, good & np.isfinite(r["ph"].to_numpy()), data.since,
                                 data.until, gap):
        ax.axvspan(x0 / 86400.0, x1 / 86400.0, facecolor="none", edgecolor="#bdbdbd",
                   hatch="///", linewidth=0)
    if unusable_spans(ts, good & np.isfinite(r["ph"].to_numpy()), data.since, data.until, gap):
        handles.append(Patch(facecolor="none", edgecolor="#bdbdbd", hatch="///",
                             label="no usable pH reading (no data or quality not good)"))
    unique: dict[str, object] = {}
    for h in handles:
        unique.setdefault(h.get_label(), h)  # type: ignore[attr-defined]
    handles = list(unique.values())
    fig.legend(handles=handles, loc="lower left", bbox_to_anchor=(0.13, 0.0), ncol=3, fontsize=8,
               frameon=False)
    if len(r) == 0:
        ax.text(0.5, 0.5, "no readings in this period", transform=ax.transAxes, ha="center",
                va="center", fontsize=12, color="#636363")
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    plt.close(fig)
    return buf.getvalue()


def unusable_spans(ts: np.ndarray, usable: np.ndarray, since: float, until: float,
                   max_hold_s: float) -> list[tuple[float, float]]:
    """Time ranges [s] without a usable reading: gaps longer than the hold, and unusable readings."""
    if ts.size == 0:
        return [(since, until)]
    starts = np.concatenate([[since], ts])
    ends = np.concatenate([ts, [until]])
    # before each reading (and after the last) the previous usable reading holds max_hold_s;
    # the period's start is treated like a usable reading, so a short lead-in is not a gap
    prev_ok = np.concatenate([[True], usable])
    covered_to = np.where(prev_ok, np.minimum(starts + max_hold_s, ends), starts)
    raw = [(float(a), float(b)) for a, b in zip(covered_to, ends, strict=True) if b > a]
    merged: list[tuple[float, float]] = []
    for a, b in raw:
        if merged and a <= merged[-1][1]:
            merged[-1] = (merged[-1][0], max(b, merged[-1][1]))
        else:
            merged.append((a, b))
    return merged


def _span_quantity(data: ProbeData, alarm_id: str) -> str:
    rows = data.events[data.events["alarm_id"] == alarm_id]
    return str(rows["quantity"].iloc[-1]) if len(rows) else ""


def _lane_label(alarm_id: str) -> str:
    """rule/probe/limit -> "rule limit" (the probe is the figure's own)."""
    parts = alarm_id.split("/")
    rule, limit = parts[0], parts[-1]
    return textwrap.fill(f"{rule} {LIMIT_TEXT.get(limit, limit)}", width=24, break_long_words=False,
                         break_on_hyphens=False)


def _pad_limits(ax: plt.Axes, bands: list[BandLimits], min_span: float = 0.5) -> None:
    """Keep the pH band lines in view, and show at least ``min_span`` pH so noise is not magnified."""
    lo, hi = ax.get_ylim()
    values = [v for b in bands if b.quantity == "ph" for _, v in b.limits()]
    if values:
        lo, hi = min(lo, min(values) - 0.2), max(hi, max(values) + 0.2)
    if hi - lo < min_span:
        mid = (hi + lo) / 2.0
        lo, hi = mid - min_span / 2.0, mid + min_span / 2.0
    ax.set_ylim(lo, hi)
