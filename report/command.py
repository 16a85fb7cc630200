"""``offwatch report SOURCE --out DIR``: read the passage once, draw the plots, write the page."""

from __future__ import annotations

import sys
import time
from pathlib import Path

from daemon.core.config import load_config
from daemon.errors import InputError, OutputError
from daemon.outlets.passage import terminal_progress
from report.collect import Passage, collect
from report.page import write_page
from report.plots import PLOTS

CAPTIONS = {
    "track": "The boat's track, coloured by the drift of the current; arrows at even distances point where "
             "the water flows (set, toward), their length the drift; stars mark fronts, triangles alerts.",
    "sea_temperature": "Sea temperature and its gradient along the track against distance run; dashed lines "
                       "mark the fronts offwatch declared.",
    "barograph": "Pressure reduced to mean sea level, and its 3-hour change with the descriptor bands; "
                 "red shading while a pressure alert was up.",
    "wind": "True wind (over the water): speed and the direction it blows from; with the sea-state figures, "
            "the current opposing the wind and the steepness factor.",
    "calibration": "The log scale and compass correction offwatch learnt, with one-sigma bands, and when they "
                   "became 'calibrated'.",
    "sensors": "Where each feed fell silent longer than its expected interval, and the sentences refused by "
               "kind of fault.",
}


def make_report(source: str | Path, out_dir: str | Path, cfg, *, progress=None, smooth: bool | None = None,
                log=None) -> tuple[Path, Passage]:
    """Collect, plot and write; returns the page's path and what was collected."""
    if not Path(source).is_file():
        raise InputError(f"{source} not found (a recording or an NMEA file)")
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise OutputError(f"cannot create {out}: {e.strerror}") from None
    passage = collect(source, cfg, progress=progress, smooth=smooth)
    images = []
    for name, title, draw in PLOTS:
        if log:
            log(f"drawing {name}")
        images.append((title, draw(passage, out / f"{name}.png"), CAPTIONS[name]))
    page = write_page(passage, images, out / "report.html")
    return page, passage


def report_command(args) -> int:
    cfg = load_config(args.config)
    bar = terminal_progress("report: reading")
    started = time.monotonic()
    try:
        page, passage = make_report(args.source, args.out, cfg, progress=bar,
                                    log=(lambda text: print(text, file=sys.stderr)) if bar else None)
    finally:
        if bar is not None:
            bar.close()
    print(f"report written to {page} ({len(PLOTS)} plots, {len(passage.track.happenings)} alert changes and "
          f"events) in {time.monotonic() - started:.0f} s")
    return 0
