"""The report's plots: each function draws one figure from a ``Passage`` and saves it as PNG.

Conventions a sailor reads without a legend hunt: times in UTC, speeds in
knots, directions in degrees true, a current's set is the direction it flows
TOWARD (its arrow points downstream), a wind's direction is where it blows
FROM. Each figure says what is missing rather than drawing an empty frame.
"""

from __future__ import annotations

import math
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import matplotlib

matplotlib.use("Agg")  # files only, no window: the report runs on a headless board too

import matplotlib.dates as mdates  # noqa: E402
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402

from report.collect import Passage, Period  # noqa: E402

DPI = 110
WIDE = (10.0, 5.6)
PRESSURE_ALERTS = ("pressure_fall", "rapid_deepening")
WIND_ALERTS = ("wind_against_current",)
# marine tendency descriptors over 3 h (hPa), as estimators/pressure.descriptor judges them
TENDENCY_BANDS = ((-99, -6.0, "falling very rapidly", "#d7301f"), (-6.0, -3.5, "falling quickly", "#fc8d59"),
                  (-3.5, -1.5, "falling", "#fdcc8a"), (-1.5, -0.1, "falling slowly", "#fef0d9"),
                  (-0.1, 0.1, "steady", "#ffffff"), (0.1, 1.5, "rising slowly", "#eff3ff"),
                  (1.5, 3.5, "rising", "#bdd7e7"), (3.5, 6.0, "rising quickly", "#6baed6"),
                  (6.0, 99, "rising very rapidly", "#2171b5"))


def _dt(t_s: float) -> datetime:
    return datetime.fromtimestamp(t_s, tz=timezone.utc)


def _column(rows: list[dict[str, Any]], key: str) -> np.ndarray:
    return np.array([np.nan if r.get(key) is None else float(r[key]) for r in rows], dtype=float)


def _times(rows: list[dict[str, Any]]) -> list[datetime]:
    return [_dt(r["t_s"]) for r in rows]


def _time_axis(ax, title_utc: bool = True) -> None:
    lo, hi = ax.get_xlim()
    # beyond a day the ticks carry the date (a row of "00:00" tells nothing)
    fmt = "%H:%M" if hi - lo <= 1.0 else ("%d %b\n%H:%M" if hi - lo <= 4.0 else "%d %b")
    ax.xaxis.set_major_locator(mdates.AutoDateLocator(tz=timezone.utc, minticks=4, maxticks=10))
    ax.xaxis.set_major_formatter(mdates.DateFormatter(fmt, tz=timezone.utc))
    if title_utc:
        ax.set_xlabel("time (UTC)")


def _date_note(p: Passage) -> str:
    if p.first_s is None:
        return ""
    a, b = _dt(p.first_s), _dt(p.last_s or p.first_s)
    return a.strftime("%d %b %Y") if a.date() == b.date() else f"{a:%d %b %Y} to {b:%d %b %Y}"


def _shade(ax, periods: list[Period], names: tuple[str, ...], end_s: float | None, color: str, label: str) -> None:
    first = True
    for per in periods:
        if per.name in names:
            stop = per.end_s if per.end_s is not None else end_s
            if stop is None:
                continue
            ax.axvspan(_dt(per.start_s), _dt(stop), color=color, alpha=0.25, lw=0, label=label if first else None)
            first = False


def _nothing(path: Path, title: str, text: str) -> Path:
    fig, ax = plt.subplots(figsize=(8, 2.2))
    ax.axis("off")
    ax.set_title(title, loc="left")
    ax.text(0.02, 0.5, text, transform=ax.transAxes, va="center", wrap=True)
    fig.savefig(path, dpi=DPI, bbox_inches="tight")
    plt.close(fig)
    return path


def _save(fig, path: Path) -> Path:
    fig.savefig(path, dpi=DPI, bbox_inches="tight")
    plt.close(fig)
    return path


# --------------------------------------------------------------------------- the track


def _nice_length(x: float) -> float:
    """A round scale-bar length (nm) at most ``x``: 1, 2 or 5 times a power of ten."""
    if x <= 0:
        return 1.0
    base = 10 ** math.floor(math.log10(x))
    for m in (5, 2, 1):
        if m * base <= x:
            return m * base
    return base


def _current_along(p: Passage, rows: list[dict[str, Any]]) -> tuple[np.ndarray, np.ndarray, np.ndarray, str]:
    """East/north current and drift at each track point: smoothed where it ran, else as published."""
    t = _column(rows, "t_s")
    if p.smoothed:
        ts = np.array([s.t_s for s in p.smoothed])
        idx = np.clip(np.searchsorted(ts, t), 0, len(ts) - 1)
        e = np.array([p.smoothed[i].east_kn for i in idx])
        n = np.array([p.smoothed[i].north_kn for i in idx])
        far = np.abs(ts[idx] - t) > 60.0  # no smoothed epoch within a minute (an outage): leave it blank
        e[far], n[far] = np.nan, np.nan
        return e, n, np.hypot(e, n), "smoothed"
    e, n = _column(rows, "current_east_kn"), _column(rows, "current_north_kn")
    bad = np.array([r.get("current_quality") not in ("valid", "degraded") for r in rows])
    e[bad], n[bad] = np.nan, np.nan
    return e, n, np.hypot(e, n), "published"


def plot_track(p: Passage, path: Path) -> Path:
    rows = [r for r in p.track.rows if r.get("lat") is not None]
    if len(rows) < 2:
        return _nothing(path, "Track and current", "Fewer than two positions in this passage: no track to draw.")
    lat, lon = _column(rows, "lat"), _column(rows, "lon")
    east, north, drift, how = _current_along(p, rows)
    mid_lat = float(np.nanmean(lat))
    coslat = math.cos(math.radians(mid_lat))
    fig, ax = plt.subplots(figsize=(9.5, 8.0))
    ax.set_aspect(1.0 / coslat)  # a degree of longitude is cos(latitude) of a degree of latitude
    pts = np.column_stack([lon, lat]).reshape(-1, 1, 2)
    segs = np.concatenate([pts[:-1], pts[1:]], axis=1)
    vmax = max(1.0, float(np.nanmax(drift)) if np.isfinite(drift).any() else 1.0)
    lc = LineCollection(segs, cmap="plasma", norm=plt.Normalize(0.0, vmax), linewidths=3.0, zorder=2)
    lc.set_array(np.nan_to_num(0.5 * (drift[:-1] + drift[1:]), nan=0.0))
    ax.add_collection(lc)
    unknown = ~np.isfinite(drift)
    if unknown.sum() >= 2:
        ax.plot(np.where(unknown, lon, np.nan), np.where(unknown, lat, np.nan), color="0.6", lw=3.0, zorder=3,
                label="current not yet known")
    known = bool(np.isfinite(drift).any())
    if known:
        cb = fig.colorbar(lc, ax=ax, shrink=0.6, pad=0.02)
        cb.set_label("drift: speed of the current (kn)")
    # arrows at even distances run, pointing where the water flows (set, toward)
    dist = _column(rows, "distance_nm")
    total = float(np.nanmax(dist)) if len(dist) else 0.0
    every = _nice_length(max(total / 18.0, 0.1))
    marks = np.arange(0.0, total + 1e-9, every)
    idx = np.unique(np.clip(np.searchsorted(dist, marks), 0, len(rows) - 1))
    idx = idx[np.isfinite(east[idx])]
    span_deg = max(np.nanmax(lat) - np.nanmin(lat), (np.nanmax(lon) - np.nanmin(lon)) * coslat, 0.01)
    # one knot drawn as 0.6 of the spacing between arrows (up to 2.5 spacings for the strongest):
    # half a knot still shows, and the length stays proportional to the drift
    strongest = max(1.0, float(np.nanmax(drift[idx])) if len(idx) else 1.0)
    arrow_per_kn = min(0.6, 2.5 / strongest) * (every / 60.0)
    if len(idx):
        q = ax.quiver(lon[idx], lat[idx], east[idx] / coslat * arrow_per_kn, north[idx] * arrow_per_kn,
                      angles="xy", scale_units="xy", scale=1.0, width=0.004, headwidth=4, color="#1b7837",
                      edgecolor="white", linewidth=0.5, zorder=4)
        key_kn = max(1.0, round(strongest / 2.0))
        ax.quiverkey(q, 0.86, 0.03, arrow_per_kn * key_kn,
                     f"current {key_kn:g} kn; arrows point\nwhere the water flows (set)",
                     labelpos="W", coordinates="axes", fontproperties={"size": 8})
    _mark_happenings(ax, p)
    ax.plot(lon[0], lat[0], "o", color="k", ms=8, zorder=5, label="start " + rows[0]["time"][11:16] + "Z")
    ax.plot(lon[-1], lat[-1], "s", color="k", ms=8, zorder=5, label="end " + rows[-1]["time"][11:16] + "Z")
    pad = 0.12 * span_deg
    ax.set_xlim(np.nanmin(lon) - pad / coslat, np.nanmax(lon) + pad / coslat)
    ax.set_ylim(np.nanmin(lat) - pad, np.nanmax(lat) + pad)
    _scale_bar(ax, coslat)
    decimals = 1 if span_deg < 0.25 else 0  # a small chart needs tenths of a minute to tell its ticks apart
    ax.xaxis.set_major_locator(plt.MaxNLocator(5))  # longitude labels are long: fewer of them
    ax.xaxis.set_major_formatter(plt.FuncFormatter(lambda v, _: _deg_min(v, "EW", decimals)))
    ax.yaxis.set_major_formatter(plt.FuncFormatter(lambda v, _: _deg_min(v, "NS", decimals)))
    ax.set_xlabel("longitude")
    ax.set_ylabel("latitude")
    ax.grid(True, color="0.85", lw=0.6)
    src = "smoothed over the whole passage" if how == "smoothed" else "as published live"
    what = (f"Track coloured by drift; current arrows every {every:g} nm run ({src})" if known else
            "Track (the current was never estimated: it needs GNSS, a heading and the speed log)")
    ax.set_title(f"{what}\n{_date_note(p)}; "
                 f"north up, true proportions at {abs(mid_lat):.1f}°{'N' if mid_lat >= 0 else 'S'}", loc="left",
                 fontsize=10)
    ax.legend(loc="upper right", fontsize=8, framealpha=0.9)
    return _save(fig, path)


def _deg_min(v: float, hemis: str, decimals: int = 0) -> str:
    h = hemis[0] if v >= 0 else hemis[1]
    a = abs(v)
    d = int(a)
    m = round((a - d) * 60, decimals)
    if m >= 60:
        d, m = d + 1, 0.0
    return f"{d}°{m:0{3 + decimals if decimals else 2}.{decimals}f}′{h}"


def _scale_bar(ax, coslat: float) -> None:
    """A bar of a round number of nautical miles in the lower left corner (1' of latitude = 1 nm)."""
    x_lo, x_hi = ax.get_xlim()
    width_nm = (x_hi - x_lo) * 60.0 * coslat
    length = _nice_length(max(width_nm / 5.0, 0.05))
    x0 = x_lo + 0.04 * (x_hi - x_lo)
    dx = length / (60.0 * coslat)  # nm to degrees of longitude at this latitude
    trans = ax.get_xaxis_transform()  # x in degrees, y as a fraction of the axes
    ax.plot([x0, x0 + dx], [0.04, 0.04], color="k", lw=3, solid_capstyle="butt", zorder=5, transform=trans)
    ax.text(x0 + dx / 2, 0.05, f"{length:g} nm", ha="center", va="bottom", fontsize=9, zorder=5, transform=trans)


def _mark_happenings(ax, p: Passage) -> None:
    done_labels: set[str] = set()
    raised = sum(1 for h in p.track.happenings if h.kind == "alert" and h.payload.get("state") == "active")
    name_them = raised <= 12  # beyond that the names hide the track: the table on the page lists them
    for h in p.track.happenings:
        if h.lat is None or h.lon is None:
            continue
        if h.kind == "event" and h.name == "front_crossing":
            warm = bool(h.payload.get("warmer"))
            label = "front: warmer water" if warm else "front: colder water"
            ax.plot(h.lon, h.lat, marker="*", ms=16, color="#e31a1c" if warm else "#1f78b4", mec="k", zorder=6,
                    label=None if label in done_labels else label)
            done_labels.add(label)
        elif h.kind == "alert" and h.payload.get("state") == "active":
            label = "alert raised (see the table)"
            ax.plot(h.lon, h.lat, marker="^", ms=9, color="#ff7f00", mec="k", zorder=6,
                    label=None if label in done_labels else label)
            done_labels.add(label)
            if not name_them:
                continue
            n_alert = sum(1 for x in done_labels if x.startswith("#"))
            done_labels.add(f"#{n_alert}")
            dy = (-12, 8, -22, 18)[n_alert % 4]  # alternate the labels so neighbours stay legible
            ax.annotate(h.name.replace("_", " "), (h.lon, h.lat), xytext=(8, dy), textcoords="offset points",
                        fontsize=7, color="#a04000", zorder=6,
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.8})


# --------------------------------------------------------------------------- sea temperature


def plot_sea_temperature(p: Passage, path: Path) -> Path:
    rows = p.track.rows
    temp, grad, dist = _column(rows, "sea_temp_c"), _column(rows, "gradient_c_per_nm"), _column(rows, "distance_nm")
    if not np.isfinite(temp).any():
        return _nothing(path, "Sea temperature", "No sea temperature in this passage (no MTW or XDR C sentences).")
    fig, (a1, a2) = plt.subplots(2, 1, figsize=WIDE, sharex=True, gridspec_kw={"height_ratios": [3, 2]})
    a1.plot(dist, temp, color="#b2182b", lw=1.4)
    a1.set_ylabel("sea temperature (°C)")
    a2.plot(dist, grad, color="#2166ac", lw=1.0)
    a2.axhline(0, color="0.5", lw=0.6)
    a2.set_ylabel("gradient along track\n(°C per nm run)")
    a2.set_xlabel("distance run (nm)")
    fronts = [h for h in p.track.happenings if h.kind == "event" and h.name == "front_crossing"]
    for i, h in enumerate(fronts):
        d = _distance_at(p, h.t_s)
        if d is None:
            continue
        color = "#e31a1c" if h.payload.get("warmer") else "#1f78b4"
        for ax in (a1, a2):
            ax.axvline(d, color=color, ls="--", lw=1.2, label=None)
        a1.annotate(f"front {h.payload.get('delta_c', 0):+.1f} °C\n{_dt(h.t_s):%H:%M}Z", (d, 0.5),
                    xycoords=a1.get_xaxis_transform(), xytext=(6, 0), textcoords="offset points", va="center",
                    fontsize=8, color=color, bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none"})
    for ax in (a1, a2):
        ax.grid(True, color="0.88", lw=0.6)
    a1.set_title(f"Sea temperature against distance run, fronts dashed (red warmer, blue colder); {_date_note(p)}",
                 loc="left", fontsize=10)
    return _save(fig, path)


def _distance_at(p: Passage, t_s: float) -> float | None:
    rows = p.track.rows
    if not rows:
        return None
    ts = _column(rows, "t_s")
    i = int(np.clip(np.searchsorted(ts, t_s), 0, len(rows) - 1))
    return rows[i].get("distance_nm")


# --------------------------------------------------------------------------- barograph


def plot_barograph(p: Passage, path: Path) -> Path:
    rows = [r for r in p.track.rows if r.get("msl_hpa") is not None]
    if len(rows) < 2:
        return _nothing(path, "Barograph", "No barometer in this passage (no MDA or XDR P sentences).")
    t = _times(rows)
    msl, tend = _column(rows, "msl_hpa"), _column(rows, "tendency_3h_hpa")
    fig, (a1, a2) = plt.subplots(2, 1, figsize=WIDE, sharex=True, gridspec_kw={"height_ratios": [3, 2]})
    a1.plot(t, msl, color="k", lw=1.4, label="pressure at mean sea level")
    lo, hi = float(np.nanmin(msl)), float(np.nanmax(msl))
    a1.set_ylim(min(lo, hi - 4.0) - 1.0, max(hi, lo + 4.0) + 1.0)  # at least ~6 hPa of scale: no drama from noise
    a1.set_ylabel("pressure MSL (hPa)")
    _shade(a1, p.alert_periods, PRESSURE_ALERTS, p.last_s, "#e31a1c", "pressure alert up")
    a1.legend(loc="lower left", fontsize=8)
    ylo = min(-7.0, float(np.nanmin(tend)) - 1.0) if np.isfinite(tend).any() else -7.0
    yhi = max(2.0, float(np.nanmax(tend)) + 1.0) if np.isfinite(tend).any() else 2.0
    for lo_b, hi_b, name, color in TENDENCY_BANDS:
        if hi_b > ylo and lo_b < yhi:
            a2.axhspan(max(lo_b, ylo), min(hi_b, yhi), color=color, alpha=0.7, lw=0)
            mid = 0.5 * (max(lo_b, ylo) + min(hi_b, yhi))
            if name != "steady":
                a2.text(1.01, mid, name, transform=a2.get_yaxis_transform(), fontsize=7, va="center")
    a2.plot(t, tend, color="k", lw=1.3)
    a2.set_ylim(ylo, yhi)
    a2.set_ylabel("3-hour tendency (hPa)")
    if not np.isfinite(tend).any():
        a2.text(0.5, 0.5, "the 3-hour tendency needs 3 hours of data", transform=a2.transAxes, ha="center")
    _time_axis(a2)
    a1.grid(True, color="0.88", lw=0.6)
    a1.set_title(f"Barograph: MSL pressure and its 3-hour change with the descriptor bands; {_date_note(p)}",
                 loc="left", fontsize=10)
    return _save(fig, path)


# --------------------------------------------------------------------------- wind


def plot_wind(p: Passage, path: Path) -> Path:
    rows = p.sea_state if any(r.get("true_wind_kn") is not None for r in p.sea_state) else p.wind
    speed, frm = _column(rows, "true_wind_kn"), _column(rows, "true_wind_from_deg")
    if not rows or not np.isfinite(speed).any():
        return _nothing(path, "Wind", "No wind in this passage (no MWV or MWD sentences).")
    t = _times(rows)
    have_sea = bool(p.sea_state)
    fig, axes = plt.subplots(3 if have_sea else 2, 1, figsize=(10.0, 7.2 if have_sea else 5.6), sharex=True)
    a1, a2 = axes[0], axes[1]
    a1.plot(t, speed, color="#4d4d4d", lw=1.2, label="true wind (over the water)")
    if have_sea:
        ss = p.sea_state
        a1.plot([_dt(r["t_s"]) for r in ss], _column(ss, "ground_wind_kn"), color="#8c6bb1", lw=0.9,
                label="wind over the ground")
    a1.set_ylabel("wind speed (kn)")
    a1.legend(loc="upper left", fontsize=8)
    a2.scatter(t, frm, s=3, color="#4d4d4d")
    a2.set_ylim(0, 360)
    a2.set_yticks([0, 90, 180, 270, 360], ["N 000", "E 090", "S 180", "W 270", "N 360"])
    a2.set_ylabel("true wind from (°T)")
    for ax in axes:
        _shade(ax, p.alert_periods, WIND_ALERTS, p.last_s, "#e31a1c", "wind against current alert")
        ax.grid(True, color="0.88", lw=0.6)
    if have_sea:
        a3 = axes[2]
        ss = p.sea_state
        ts = [_dt(r["t_s"]) for r in ss]
        # the wind sea's peak period, as the caution judges it (the band's worst period grows without bound
        # near blocking in linear theory), bounded where its waves break; older recordings: the newest
        # of those fields they have
        name = next((n for n in ("peak_bounded_steepness_factor", "peak_steepness_factor", "steepness_factor")
                     if any(r.get(n) is not None for r in ss)), "steepness_factor")
        steep = _column(ss, name)
        a3.plot(ts, steep, color="#d7301f", lw=1.4,
                label="steepness factor at the wind sea's peak period, to breaking (1 = as in still water)")
        a3.axhline(1.0, color="0.4", lw=0.7, ls=":")
        a3.set_ylim(0, max(2.0, float(np.nanmax(steep)) * 1.15) if np.isfinite(steep).any() else 2.0)
        a3.set_ylabel("wave steepness factor", color="#d7301f")
        b3 = a3.twinx()  # a second unit on its own axis: knots
        b3.plot(ts, _column(ss, "opposing_current_kn"), color="#1b7837", lw=1.0, ls="--",
                label="current against the wind (kn)")
        b3.set_ylabel("current against\nthe wind (kn)", color="#1b7837")
        b3.set_ylim(bottom=0)
        lines = a3.get_legend_handles_labels()
        more = b3.get_legend_handles_labels()
        a3.legend(lines[0] + more[0], lines[1] + more[1], loc="upper left", fontsize=8)
        _time_axis(a3)
        note = "shaded: the wind-against-current alert was up"
    else:
        _time_axis(a2)
        note = "the wind-against-current figures (offwatch/sea_state) are not in this passage"
    a1.set_title(f"Wind: speed and the direction it blows from; {_date_note(p)}\n({note})", loc="left",
                 fontsize=10)
    return _save(fig, path)


# --------------------------------------------------------------------------- calibration


def plot_calibration(p: Passage, path: Path) -> Path:
    rows = [r for r in p.track.rows if r.get("stw_scale") is not None]
    if len(rows) < 2:
        return _nothing(path, "Log and compass calibration",
                        "The current filter never ran in this passage (it needs GNSS, heading and the log).")
    t = _times(rows)
    k, ks = _column(rows, "stw_scale"), _column(rows, "stw_scale_sigma")
    d, ds = _column(rows, "heading_offset_deg"), _column(rows, "heading_offset_sigma_deg")
    fig, (a1, a2) = plt.subplots(2, 1, figsize=WIDE, sharex=True)
    a1.fill_between(t, k - ks, k + ks, color="#9ecae1", alpha=0.8, lw=0, label="± one sigma")
    a1.plot(t, k, color="#08519c", lw=1.3, label="learnt log scale")
    a1.axhline(1.0, color="0.4", lw=0.7, ls=":")
    a1.set_ylabel("log scale\n(true STW ÷ log reading)")
    a2.fill_between(t, d - ds, d + ds, color="#fdae6b", alpha=0.8, lw=0, label="± one sigma")
    a2.plot(t, d, color="#a63603", lw=1.3, label="learnt compass correction")
    a2.axhline(0.0, color="0.4", lw=0.7, ls=":")
    a2.set_ylabel("compass correction (°)\n(added to the reading)")
    for ax in (a1, a2):
        if p.calibrated_s is not None:
            ax.axvline(_dt(p.calibrated_s), color="#238b45", lw=1.5, ls="--",
                       label=f"calibrated from {_dt(p.calibrated_s):%H:%M}Z" if _date_note(p).count(" to ") == 0
                       else f"calibrated from {_dt(p.calibrated_s):%d %b %H:%M}Z")
        ax.legend(loc="upper right", fontsize=8)
        ax.grid(True, color="0.88", lw=0.6)
    _time_axis(a2)
    a1.set_title(f"What offwatch learnt about the speed log and the compass; {_date_note(p)}", loc="left",
                 fontsize=10)
    return _save(fig, path)


# --------------------------------------------------------------------------- sensors


FEED_NAMES = {"fix": "GNSS position", "ground_velocity": "GNSS course/speed", "heading": "compass",
              "water_speed": "speed log", "sea_temperature": "sea thermometer", "pressure": "barometer",
              "air_temperature": "air thermometer", "apparent_wind": "wind vane (apparent)",
              "water_wind": "wind (true, from the vane)", "depth": "depth sounder", "attitude": "heel sensor"}


COUNTER_WORDS = {"unknown": "not used by offwatch", "implausible": "values out of range", "bad_checksum": "bad checksum",
                 "no_checksum": "no checksum", "not_sentence": "not a sentence (line noise)", "unparseable": "garbled",
                 "empty": "empty fields", "proprietary": "proprietary (not used)", "ais": "AIS (not used)",
                 "no_variation": "magnetic, no variation known"}


def plot_sensors(p: Passage, path: Path) -> Path:
    feeds = sorted({g.name for g in p.feed_gaps})
    bad = {name: {k: v for k, v in c.items() if k != "good" and v} for name, c in p.counters.items()}
    bad = {k: v for k, v in bad.items() if v}
    ratios = [max(1, len(feeds)), 3] if feeds else [0.2, 3]
    fig, (a1, a2) = plt.subplots(2, 1, figsize=(10.0, 6.4), gridspec_kw={"height_ratios": ratios})
    if p.first_s is not None and feeds:
        for i, feed in enumerate(feeds):
            spans = [(_dt(g.start_s), _dt(g.end_s if g.end_s is not None else p.last_s) - _dt(g.start_s))
                     for g in p.feed_gaps if g.name == feed]
            a1.broken_barh([(mdates.date2num(s), max(d.total_seconds() / 86400.0, 30 / 86400.0)) for s, d in spans],
                           (i - 0.35, 0.7), color="#e31a1c")
        a1.set_yticks(range(len(feeds)), [FEED_NAMES.get(f, f) for f in feeds])
        a1.set_xlim(_dt(p.first_s), _dt(p.last_s))
        _time_axis(a1)
        a1.set_title("Sensor gaps: red where a feed was silent longer than its expected interval", loc="left",
                     fontsize=10)
    else:
        a1.axis("off")
        a1.set_title("Sensor gaps: no feed was silent longer than its expected interval", loc="left", fontsize=10)
    if bad:
        names = sorted(bad)
        kinds = sorted({k for v in bad.values() for k in v})
        left = np.zeros(len(names))
        for kind in kinds:
            vals = np.array([bad[n].get(kind, 0) for n in names], dtype=float)
            a2.barh(range(len(names)), vals, left=left, label=COUNTER_WORDS.get(kind, kind.replace("_", " ")))
            left += vals
        a2.set_yticks(range(len(names)), [n[:-2] + " (not a sentence)" if n.endswith(" -") else n for n in names])
        a2.set_xlabel("sentences not taken (count over the passage)")
        a2.legend(fontsize=8, loc="lower right")
        good = sum(c.get("good", 0) for c in p.counters.values())
        a2.set_title(f"Input counters: sentences not taken, by source and sentence, and why ({good} taken)",
                     loc="left", fontsize=10)
    else:
        a2.axis("off")
        a2.set_title("Input counters: every sentence was taken" if p.counters else
                     "Input counters: not in this passage (no status messages)", loc="left", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


PLOTS = (("track", "Track and current", plot_track),
         ("sea_temperature", "Sea temperature and fronts", plot_sea_temperature),
         ("barograph", "Barograph", plot_barograph),
         ("wind", "Wind and wind against current", plot_wind),
         ("calibration", "Log and compass calibration", plot_calibration),
         ("sensors", "Sensor gaps and input counters", plot_sensors))
