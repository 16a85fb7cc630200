"""The report's one HTML page: summary, plots (embedded as data URIs), every alert and event.

Self-contained: no script, no stylesheet or font fetched, the images inside as
base64 PNG, so it opens offline on a phone and prints. Every text from the
passage is escaped (a payload is data, never markup).
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

from report.collect import Passage, iso_minute

ADVISORY = ("Advisory only, not for navigation: the figures come from the boat's own instruments; "
            "check official forecasts, charts and your own seamanship.")


def _dm(deg: float | None, hemis: str) -> str:
    if deg is None:
        return ""
    h = hemis[0] if deg >= 0 else hemis[1]
    a = abs(deg)
    d, m = int(a), (a - int(a)) * 60.0
    if round(m, 1) >= 60.0:
        d, m = d + 1, 0.0
    return f"{d}°{m:04.1f}′{h}"


def position_text(lat: float | None, lon: float | None) -> str:
    """``40°56.2′N 32°20.8′W``, or empty when unknown."""
    if lat is None or lon is None:
        return ""
    return f"{_dm(lat, 'NS')} {_dm(lon, 'EW')}"


def summary_lines(p: Passage) -> list[tuple[str, str]]:
    """The summary as (what, value) pairs in plain words."""
    out: list[tuple[str, str]] = []
    if p.first_s is None:
        return [("Passage", "no messages in this source")]
    hours = (p.last_s - p.first_s) / 3600.0
    out.append(("Time", f"{iso_minute(p.first_s)} to {iso_minute(p.last_s)} ({int(hours)} h "
                        f"{int(round((hours % 1) * 60)):02d} min)"))
    rows = [r for r in p.track.rows if r.get("lat") is not None]
    if rows:
        out.append(("From / to", f"{position_text(rows[0]['lat'], rows[0]['lon'])} → "
                                 f"{position_text(rows[-1]['lat'], rows[-1]['lon'])}"))
    out.append(("Distance run", f"{p.total_nm:.1f} nm over the ground"))
    if p.sog_n:
        out.append(("Mean speed over ground", f"{p.sog_sum / p.sog_n:.1f} kn"))
    if p.stw_n:
        out.append(("Mean speed through water", f"{p.stw_sum / p.stw_n:.1f} kn as the log read it"))
    out.append(("Calibration", calibration_words(p)))
    if p.strongest:
        s = p.strongest
        out.append(("Strongest current", f"{s['drift_kn']:.1f} kn (± {s.get('drift_sigma_kn') or 0:.2f}) setting "
                                         f"toward {s['set_deg']:03.0f}°T at {iso_minute(s['t_s'])}, "
                                         f"{position_text(s['lat'], s['lon'])}"))
    fronts = [h for h in p.track.happenings if h.kind == "event" and h.name == "front_crossing"]
    out.append(("Fronts crossed", str(len(fronts)) if fronts else "none"))
    raised = [h for h in p.track.happenings if h.kind == "alert" and h.payload.get("state") == "active"]
    out.append(("Alerts raised", f"{len(raised)}" if raised else "none"))
    out.append(("Current shown", p.smoother_note or "as published"))
    if p.thinned_note:
        out.append(("Read", p.thinned_note))
    return out


def calibration_words(p: Passage) -> str:
    """The learnt log scale and compass correction in plain words, from the last current message."""
    last = next((r for r in reversed(p.track.rows) if r.get("stw_scale") is not None), None)
    if last is None:
        return "not learnt (the current filter never ran)"
    k, ks = last["stw_scale"], last.get("stw_scale_sigma")
    d, ds = last["heading_offset_deg"], last.get("heading_offset_sigma_deg")
    pct = (k - 1.0) * 100.0
    log = ("the log reads about right" if abs(pct) < 1.0 else
           f"the log reads {abs(pct):.0f} % {'low' if pct > 0 else 'high'} (true speed = {k:.3f} × reading"
           + (f" ± {ks:.3f}" if ks is not None else "") + ")")
    cmp_ = ("the compass reads about right" if abs(d) < 1.0 else
            f"the compass reads {abs(d):.1f}° {'low' if d > 0 else 'high'} (add {d:+.1f}°"
            + (f" ± {ds:.1f}°" if ds is not None else "") + ")")
    status = last.get("calibration") or "status unknown"
    when = f" since {iso_minute(p.calibrated_s)[11:]}" if p.calibrated_s is not None and status == "calibrated" else ""
    return f"{log}; {cmp_}. At the end: {status}{when}."


def _img(path: Path) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{html.escape(path.stem)}">'


def _table(head: list[str], rows: list[list[str]]) -> str:
    th = "".join(f"<th>{html.escape(h)}</th>" for h in head)
    body = "\n".join("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in r) + "</tr>" for r in rows)
    return f'<div class="scroll"><table><thead><tr>{th}</tr></thead><tbody>\n{body}\n</tbody></table></div>'


def alert_rows(p: Passage) -> list[list[str]]:
    rows = []
    for h in p.track.happenings:
        if h.kind != "alert":
            continue
        rows.append([iso_minute(h.t_s), str(h.payload.get("priority", "")), h.name.replace("_", " "),
                     str(h.payload.get("state", "")), position_text(h.lat, h.lon), h.text])
    return rows


def event_rows(p: Passage) -> list[list[str]]:
    return [[iso_minute(h.t_s), h.title, position_text(h.lat, h.lon), h.text]
            for h in p.track.happenings if h.kind == "event"]


def write_page(p: Passage, images: list[tuple[str, Path, str]], out: Path) -> Path:
    """``images``: (title, PNG path, one-line caption) in the order shown."""
    summary = "\n".join(f"<tr><th>{html.escape(k)}</th><td>{html.escape(v)}</td></tr>" for k, v in summary_lines(p))
    figures = "\n".join(f'<section><h2>{html.escape(title)}</h2>{_img(path)}<p class="cap">{html.escape(cap)}</p>'
                        f"</section>" for title, path, cap in images)
    alerts = alert_rows(p)
    events = event_rows(p)
    alert_html = (_table(["time (UTC)", "priority", "alert", "state", "position", "what was seen"], alerts)
                  if alerts else "<p>No alert was raised.</p>")
    event_html = (_table(["time (UTC)", "event", "position", "what"], events) if events
                  else "<p>No event.</p>")
    title = f"Passage report {iso_minute(p.first_s)[:10]}" if p.first_s is not None else "Passage report"
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{html.escape(title)}</title>
<style>
body {{ font-family: sans-serif; margin: 0 auto; padding: 0.8em; max-width: 62em; line-height: 1.4; }}
img {{ max-width: 100%; height: auto; border: 1px solid #ddd; }}
table {{ border-collapse: collapse; font-size: 0.9em; }}
th, td {{ border: 1px solid #aaa; padding: 0.2em 0.4em; text-align: left; vertical-align: top; }}
.scroll {{ overflow-x: auto; }}
.cap {{ font-size: 0.9em; color: #333; }}
.advice {{ background: #fff4e0; padding: 0.5em; border-left: 4px solid #e08000; }}
@media print {{ section {{ break-inside: avoid; }} }}
</style></head><body>
<h1>{html.escape(title)}</h1>
<p class="advice">{html.escape(ADVISORY)}</p>
<h2>Summary</h2>
<table>{summary}</table>
{figures}
<section><h2>Alerts</h2>
<p>Every change: raised (active), acknowledged, rectified (condition gone, not yet acknowledged), cleared.
Position: the boat's position at that moment.</p>
{alert_html}</section>
<section><h2>Events</h2>
{event_html}</section>
<p class="cap">Made by offwatch from {html.escape(Path(p.source).name)}: {p.messages} messages.
Times UTC; speeds in knots; directions in degrees true; a current's set is where it flows toward,
a wind's direction where it blows from.</p>
</body></html>
"""
    out.write_text(page, encoding="utf-8")
    return out
