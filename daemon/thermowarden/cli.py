"""The ``thermowarden`` command line.

Sub-commands:
  assess   spot check of one space: readings as JSON on stdin or --input, every index out
  check    validate a site file, its CSV and rule packs; print what it resolves to
  replay   run the rules offline over a recorded feed and print every advisory event
  run      the service: subscribe, evaluate, publish advisories (advisory only)
"""

from __future__ import annotations

import argparse
import gzip
import json
import sys
from collections.abc import Sequence
from typing import TextIO

CAUTION = ("Heat-stress figures are screening values, not a diagnosis: individual factors "
           "(acclimatisation, hydration, fitness, medication, clothing) change the risk. "
           "thermowarden is advisory only; follow local regulations and consult a qualified "
           "occupational hygienist.")


def _read_json(stream: TextIO, name: str) -> object:
    text = stream.read()
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise SystemExit(f"thermowarden assess: {name}: not valid JSON: {exc.msg} at line "
                         f"{exc.lineno} column {exc.colno}") from None


def _format_table(result: dict[str, dict[str, object]]) -> str:
    width = max(len(k) for k in result)
    lines = []
    for name, item in result.items():
        value = item["value"]
        if value is None:
            shown = f"-   ({item.get('reason')})"
        else:
            unit = item["unit"]
            shown = f"{value} {unit}" if unit not in ("1", "category") else f"{value}"
            shown = f"{shown:<16} {item['method']}"
        lines.append(f"{name:<{width}}  {shown}")
    return "\n".join(lines)


def cmd_assess(args: argparse.Namespace) -> int:
    """Spot check one space; print every index as JSON (or a table)."""
    from thermowarden.core.indices import compute_indices, space_result
    from thermowarden.core.spot_check import InputError, parse_spot_check

    if args.input:
        try:
            with open(args.input, encoding="utf-8") as fh:
                data = _read_json(fh, args.input)
        except OSError as exc:
            print(f"thermowarden assess: cannot read {args.input}: {exc.strerror}",
                  file=sys.stderr)
            return 2
    else:
        data = _read_json(sys.stdin, "stdin")
    try:
        if not isinstance(data, dict):
            raise InputError("input", "expected a JSON object of readings")
        inputs = parse_spot_check(data)
    except InputError as exc:
        print(f"thermowarden assess: {exc}", file=sys.stderr)
        return 2
    table = compute_indices(inputs)
    result = space_result(table, 0)
    if args.format == "table":
        print(_format_table(result))
        if any(result[k]["value"] is not None for k in result if k.startswith(("wbgt", "phs"))):
            print()
            print(CAUTION)
    else:
        result["caution"] = {"value": None, "unit": "", "method": "", "reason": CAUTION}
        json.dump(result, sys.stdout, ensure_ascii=False, indent=2)
        print()
    return 0


def cmd_check(args: argparse.Namespace) -> int:
    """Validate a site; errors one per line with file:line:column; exit 0 when valid."""
    from thermowarden.site_check import check_site, resolved_map

    report = check_site(args.config)
    if not report.ok:
        for issue in report.issues:
            print(issue, file=sys.stderr)
        print(f"thermowarden check: {len(report.issues)} problem(s); nothing was started",
              file=sys.stderr)
        return 1
    assert report.model is not None
    if not args.quiet:
        print("\n".join(resolved_map(report.model)))
    for w in report.warnings:
        print(f"warning: {w}", file=sys.stderr)
    n = report.model.n_spaces
    print(f"{args.config}: valid ({n} space{'s' if n != 1 else ''}, "
          f"{len(report.model.points)} points, {len(report.warnings)} warning(s))",
          file=sys.stderr)
    return 0


def cmd_replay(args: argparse.Namespace) -> int:
    """Replay a recorded feed offline; print events as JSON lines (or a summary)."""
    from thermowarden.config import ConfigError, load_site
    from thermowarden.replay import FeedError, read_feed, replay, summarise

    try:
        config = load_site(args.config)
    except ConfigError as exc:
        for issue in exc.issues:
            print(issue, file=sys.stderr)
        return 1
    try:
        opener = gzip.open if args.feed.endswith(".gz") else open
        with opener(args.feed, "rt", encoding="utf-8") as fh:
            result = replay(config, read_feed(fh, args.feed), base=args.config,
                            full_events=args.full, tick_s=args.tick)
    except OSError as exc:
        print(f"thermowarden replay: cannot read {args.feed}: {exc.strerror}", file=sys.stderr)
        return 2
    except FeedError as exc:
        print(f"thermowarden replay: {exc}", file=sys.stderr)
        return 2
    except ConfigError as exc:
        for issue in exc.issues:
            print(issue, file=sys.stderr)
        return 1
    if args.summary:
        json.dump(summarise(result), sys.stdout, indent=2, ensure_ascii=False)
        print()
    else:
        for e in result.events:
            print(json.dumps(e, ensure_ascii=False))
    return 0


def _shard(text: str) -> tuple[int, int]:
    try:
        index, count = (int(x) for x in text.split("/"))
    except ValueError:
        raise argparse.ArgumentTypeError("expected INDEX/COUNT, for example 0/2") from None
    if not 0 <= index < count:
        raise argparse.ArgumentTypeError("INDEX must be 0 to COUNT-1")
    return index, count


def cmd_run(args: argparse.Namespace) -> int:
    """Run the service until SIGTERM or Ctrl-C."""
    import logging
    import signal

    from thermowarden.config import ConfigError
    from thermowarden.shell.bootstrap import bootstrap
    from thermowarden.shell.logs import setup_logging

    setup_logging(args.log_format, args.log_level)
    log = logging.getLogger("thermowarden")
    try:
        running = bootstrap(args.config, broker_url=args.broker, http_port=args.http_port,
                            state_dir=args.state_dir, shard=args.shard,
                            spaces=args.spaces.split(",") if args.spaces else None)
    except ConfigError as exc:
        for issue in exc.issues:
            print(issue, file=sys.stderr)
        print("thermowarden run: the configuration was refused; nothing was started",
              file=sys.stderr)
        return 1
    except (OSError, ValueError) as exc:
        print(f"thermowarden run: {exc}", file=sys.stderr)
        return 1
    service = running.service

    def stop(signum: int, frame: object) -> None:
        log.info("signal %s received", signal.Signals(signum).name)
        service.request_stop()

    signal.signal(signal.SIGTERM, stop)
    signal.signal(signal.SIGINT, stop)
    service.run()
    if running.http is not None:
        running.http.shutdown()
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="thermowarden",
        description="Thermal-comfort and heat-stress advisories for buildings and hot "
                    "workplaces. Advisory only: it never actuates equipment.")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    p = sub.add_parser("assess", help="spot check one space: readings as JSON in, every index "
                                      "out")
    p.add_argument("--input", metavar="FILE", help="JSON file of readings (default: stdin)")
    p.add_argument("--format", choices=("json", "table"), default="json")
    p.set_defaults(func=cmd_assess)

    p = sub.add_parser("check", help="validate a site file, its CSV and rule packs")
    p.add_argument("config", metavar="SITE", help="site configuration (YAML)")
    p.add_argument("--quiet", action="store_true", help="do not print the resolved map")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("replay", help="run the rules offline over a recorded feed")
    p.add_argument("--config", required=True, metavar="SITE", help="site configuration")
    p.add_argument("feed", metavar="FEED", help="JSON lines of {t, topic, payload}")
    p.add_argument("--summary", action="store_true",
                   help="per rule and audience: advisories raised, time active, notifications")
    p.add_argument("--full", action="store_true", help="print whole event payloads")
    p.add_argument("--tick", type=float, metavar="SECONDS",
                   help="evaluation interval in feed time (default: the site's tick_s)")
    p.set_defaults(func=cmd_replay)

    p = sub.add_parser("run", help="run the service on a broker (advisory only)")
    p.add_argument("--config", required=True, metavar="SITE", help="site configuration")
    p.add_argument("--broker", metavar="URL", help="override the site's broker "
                   "(mqtt://host:port or mqtts://host:port)")
    p.add_argument("--http-port", type=int, metavar="N",
                   help="serve /healthz, /readyz and /metrics on 127.0.0.1:N")
    p.add_argument("--state-dir", metavar="DIR",
                   help="where the SQLite store lives (default $STATE_DIRECTORY or ./state)")
    p.add_argument("--shard", type=_shard, metavar="INDEX/COUNT",
                   help="evaluate only this shard of the spaces (stable hash of the space id)")
    p.add_argument("--spaces", metavar="ID,ID", help="evaluate only these spaces")
    p.add_argument("--log-format", choices=("text", "json"), default="text")
    p.add_argument("--log-level", choices=("debug", "info", "warning", "error"), default="info")
    p.set_defaults(func=cmd_run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    code: int = args.func(args)
    return code


if __name__ == "__main__":
    sys.exit(main())
