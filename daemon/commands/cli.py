"""The ``offwatch`` command line."""

from __future__ import annotations

import argparse
import logging
import os
import sys
import time
from typing import NoReturn

from daemon import __version__
from daemon.errors import OffwatchError

DESCRIPTION = """\
offwatch keeps watch on the boat's instruments while the crew is off watch:
it works out the set and drift of the current and how sure that is, checks the
speed log and compass, notices sea-temperature fronts and a falling barometer,
and publishes all of it, with cautions, on MQTT for the displays aboard.

Its cautions are advisory, not for navigation: they never replace official
forecasts, charts or your own seamanship.
"""

EPILOG = """\
examples:
  offwatch demo                                   replay the demo passage end to end
  offwatch replay passage.nmea.gz --jsonl out.jsonl
  offwatch replay a.nmea b.nmea --mqtt mqtt://127.0.0.1:1883 --record passage.sqlite
  offwatch run --config /etc/offwatch/offwatch.toml
  offwatch config                                 every config key: default, unit, range
"""


class _OneLineParser(argparse.ArgumentParser):
    """An unknown option or a bad value is one line on stderr, not the usage block (the README promises it)."""

    def error(self, message: str) -> NoReturn:
        self.exit(2, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    p = _OneLineParser(prog="offwatch", description=DESCRIPTION, epilog=EPILOG,
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--version", action="version", version=f"offwatch {__version__}")
    p.add_argument("-v", "--verbose", action="store_true", help="log more detail")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    run = sub.add_parser("run", help="the always-on service: read the instruments, publish, record")
    run.add_argument("--config", metavar="FILE", help="TOML config (inputs, broker, installation)")
    run.add_argument("--mqtt", metavar="URL", help="broker, mqtt://host:port or mqtts://host:port (overrides the config)")

    rep = sub.add_parser("replay", help="feed recorded files through the same pipeline as run",
                         description="Replay NMEA files (plain, TAG blocks, gzipped) or a recording (.sqlite) "
                                     "through the very same pipeline as run, as fast as it can.")
    rep.add_argument("files", nargs="+", metavar="FILE")
    rep.add_argument("--config", metavar="FILE")
    rep.add_argument("--jsonl", metavar="OUT", help="write every published message to OUT, one JSON object a line")
    rep.add_argument("--record", metavar="DB", help="keep the passage in a recording, as run does")
    rep.add_argument("--mqtt", metavar="URL", help="publish to this broker as well, exactly as run would")
    rep.add_argument("--speed", type=float, metavar="X", help="pace the replay at X times real time (default: as fast as it can)")
    rep.add_argument("--mqtt-wait", type=float, metavar="S",
                     help="at the end, wait at most S seconds for the broker to take what is queued (default 15); "
                          "exit status 3 when something was not delivered or not recorded")
    rep.add_argument("--quiet", action="store_true", help="no summary at the end")

    demo = sub.add_parser("demo", help="replay the demo passage end to end, with a broker, and summarise")
    demo.add_argument("--mqtt", metavar="URL", help="broker to use (default: 127.0.0.1:1883, or an embedded one)")
    demo.add_argument("--out", metavar="DIR", default="demo-out", help="where the JSONL and recording go")
    demo.add_argument("--prefix", metavar="PREFIX", default=None,
                      help="topic prefix to publish under (default: offwatch-demo, never the service's offwatch)")

    exp = sub.add_parser("export", help="the track and the estimates as CSV, GPX or GeoJSON; a recording's raw NMEA",
                         description="csv, gpx, geojson: the track with the estimates beside each point, from a "
                                     "recording or any replayable file. nmea: a recording's raw sentences as "
                                     "TAG-block NMEA 0183 text, which replays to the same output.")
    exp.add_argument("source", metavar="SOURCE", help="a recording or any replayable file")
    exp.add_argument("--format", choices=("csv", "gpx", "geojson", "nmea"), required=True)
    exp.add_argument("--out", metavar="FILE", required=True)
    exp.add_argument("--config", metavar="FILE")

    watch = sub.add_parser("watch", help="a live terminal view of what the service publishes",
                           description="A live view for the chart table (80 x 24 is enough): instruments, current, "
                                       "barometer, alerts; arrow keys select an alert, Enter shows it whole, "
                                       "a acknowledges it, q quits. Uses the service's [mqtt] settings "
                                       "(user, password, TLS files) from --config.")
    watch.add_argument("--config", metavar="FILE", help="the service's TOML config, for its [mqtt] settings")
    watch.add_argument("--mqtt", metavar="URL", help="broker (overrides the config; default mqtt://127.0.0.1:1883)")
    watch.add_argument("--prefix", help="topic prefix (overrides the config; default offwatch)")
    watch.add_argument("--once", action="store_true", help="print one view after a few seconds and exit")

    conf = sub.add_parser("config", help="every config key with its unit, range and default; or check a file",
                          description="Without options: every key of the TOML config with its default, unit, "
                                      "range and meaning, from the parameter tables themselves.")
    conf.add_argument("--keys", action="store_true", help="list every key (the default)")
    conf.add_argument("--markdown", action="store_true", help="as Markdown tables (the README's reference)")
    conf.add_argument("--check", metavar="FILE", help="read FILE as offwatch would and say whether it is valid")

    return p


def setup_logging(level: int) -> None:
    """Under journald (it sets JOURNAL_STREAM) the journal stamps each line; anywhere else a line
    carries its own time, in UTC like every other time offwatch shows."""
    fmt = "%(levelname)s %(name)s: %(message)s"
    if not os.environ.get("JOURNAL_STREAM"):
        fmt = "%(asctime)s " + fmt
    logging.basicConfig(level=level, format=fmt, datefmt="%Y-%m-%dT%H:%M:%SZ")
    for handler in logging.getLogger().handlers:
        if handler.formatter is not None:
            handler.formatter.converter = time.gmtime


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    # the service logs its life to the journal; a replay's account is its summary
    quiet = logging.INFO if args.command == "run" else logging.WARNING
    setup_logging(logging.DEBUG if args.verbose else quiet)
    if args.command is None:
        parser.print_help()
        return 2
    try:
        if args.command == "replay":
            from daemon.commands.replay import replay_command
            return replay_command(args)
        if args.command == "run":
            from daemon.commands.service import run_command
            return run_command(args)
        if args.command == "export":
            from daemon.outlets.export import export_command
            return export_command(args)
        if args.command == "watch":
            from daemon.commands.watch import watch_command
            return watch_command(args)
        if args.command == "config":
            from daemon.commands.configref import config_command
            return config_command(args)
        if args.command == "demo":
            from daemon.commands.demo import demo_command
            return demo_command(args)
    except OffwatchError as e:
        print(f"offwatch: {e}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:  # the reader went away (`offwatch config | head`): nothing more to say
        sys.stderr.close()
        return 0
    parser.error(f"unknown command {args.command}")
    return 2


if __name__ == "__main__":
    sys.exit(main())
