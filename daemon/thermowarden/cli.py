"""The ``thermowarden`` command line.

Sub-commands:
  assess   spot check of one space: readings as JSON on stdin or --input, every index out
  check    validate a site file, its CSV and rule packs; print what it resolves to
  replay   run the rules offline over a recorded feed and print every advisory event
  run      the service: subscribe, evaluate, publish advisories (advisory only)
  demo     the whole job on an invented site in a couple of minutes
  simulate publish an invented scenario to a broker, or write it as a feed file
  report   an HTML report per site and period, from the service's store or a feed
  export   the conditions history from the service's store to CSV or Parquet
"""

from __future__ import annotations

import argparse
import gzip
import json
import sys
import textwrap
from collections.abc import Iterable, Sequence
from typing import TYPE_CHECKING, Any, TextIO

if TYPE_CHECKING:
    from thermowarden.config import SiteConfig

CAUTION = ("Heat-stress figures are screening values, not a diagnosis: individual factors "
           "(acclimatisation, hydration, fitness, medication, clothing) change the risk. "
           "thermowarden is advisory only; follow local regulations and consult a qualified "
           "occupational hygienist.")
EXIT_CONFIG = 78
"""`run` exit status for a configuration it refuses or a store that cannot be used
(EX_CONFIG from sysexits.h): the systemd unit does not restart on it, so a mistake that only
a person can fix does not become a restart loop."""


def _read_json(stream: TextIO, name: str) -> object:
    """The JSON in ``stream``; bad or empty input exits 2 (bad input) with one line."""
    text = stream.read()
    if not text.strip():
        print(f"thermowarden assess: {name}: no input (expected a JSON object of readings)",
              file=sys.stderr)
        raise SystemExit(2)
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        print(f"thermowarden assess: {name}: not valid JSON: {exc.msg} at line "
              f"{exc.lineno} column {exc.colno}", file=sys.stderr)
        raise SystemExit(2) from None


TABLE_WIDTH = 100
"""Columns of ``assess --format table``: every line fits."""

def _print_issues(exc: Exception) -> None:
    """Print every problem of a refused configuration, one per line."""
    for issue in getattr(exc, "issues", [exc]):
        print(issue, file=sys.stderr)


def _load_or_report(path: str) -> SiteConfig | None:
    """The site, or None after printing why it was refused."""
    from thermowarden.config import ConfigError, load_site

    try:
        return load_site(path)
    except ConfigError as exc:
        _print_issues(exc)
        return None


def cmd_assess(args: argparse.Namespace) -> int:
    """Spot check one space; print every index as JSON (or a table)."""
    from thermowarden.core.indices import compute_indices, space_result
    from thermowarden.core.spot_check import InputError, assumptions_used, parse_spot_check

    if args.input:
        try:
            with open(args.input, encoding="utf-8") as fh:
                data = _read_json(fh, args.input)
        except OSError as exc:
            print(f"thermowarden assess: cannot read {args.input}: {exc.strerror}",
                  file=sys.stderr)
            return 2
    else:
        if sys.stdin.isatty():
            print("thermowarden assess: reading one space's readings as a JSON object from "
                  "stdin; end with Ctrl-D (or use --input FILE). For example:\n"
                  '  {"air_temperature": 31.2, "relative_humidity": 44, '
                  '"globe_temperature": 34.6, "air_speed": 0.4, "work_class": "moderate"}',
                  file=sys.stderr, flush=True)
        data = _read_json(sys.stdin, "stdin")
    try:
        if not isinstance(data, dict):
            raise InputError("input", "expected a JSON object of readings")
        inputs = parse_spot_check(data)
        assumed = assumptions_used(data)
    except InputError as exc:
        print(f"thermowarden assess: {exc}", file=sys.stderr)
        return 2
    _prepare_models()
    table = compute_indices(inputs)
    result = space_result(table, 0)
    for q, note in assumed.items():
        if q in result and result[q]["value"] is not None:
            result[q]["method"] = f"{note} (not measured)"
    shown = "; ".join(f"{q.replace('_', ' ')} {n.removeprefix('assumed: ')}"
                      for q, n in assumed.items())
    if args.format == "table":
        from thermowarden.assess_text import (
            defaults_taken,
            format_table,
            place_kind,
            shown_rows,
            verdict,
        )

        kind, why = place_kind(data)
        print(textwrap.fill(verdict(result, kind, bool(inputs.acclimatised[0])), TABLE_WIDTH,
                            subsequent_indent="  "))
        print(textwrap.fill(f"Read as {kind} ({why}).", TABLE_WIDTH))
        if shown:
            print(textwrap.fill(f"Not measured, assumed: {shown}.", TABLE_WIDTH))
        taken = defaults_taken(data, kind)
        if taken:
            print(textwrap.fill(f"Not given, taken as: {'; '.join(taken)}.", TABLE_WIDTH))
        print()
        names = shown_rows(result, kind, args.all, bool(inputs.hot_work[0]))
        print(format_table(result, names, TABLE_WIDTH))
        if len(names) < len(result):
            print(f"({len(result) - len(names)} rows that do not apply here left out; "
                  "--all shows every row)")
        if any(result[k]["value"] is not None for k in names if k.startswith(("wbgt", "phs"))):
            print()
            print(textwrap.fill(CAUTION, TABLE_WIDTH))
    else:
        if shown:
            result["assumed"] = {"value": None, "unit": "", "method": "",
                                 "reason": f"not measured, assumed: {shown}"}
        result["caution"] = {"value": None, "unit": "", "method": "", "reason": CAUTION}
        json.dump(result, sys.stdout, ensure_ascii=False, indent=2)
        print()
    return 0


def cmd_check(args: argparse.Namespace) -> int:
    """Validate a site; errors one per line with file:line:column; exit 0 when valid, 1
    when refused, 3 when valid but a hot-work space gets no heat-stress evaluation."""
    from thermowarden.site_check import (
        check_site,
        grouped_warnings,
        resolved_map,
        unsafe_warnings,
    )

    report = check_site(args.config, prepare=_prepare_models)
    if not report.ok:
        for issue in report.issues:
            print(issue, file=sys.stderr)
        print(f"thermowarden check: {len(report.issues)} problem(s); nothing was started",
              file=sys.stderr)
        return 1
    assert report.model is not None
    if not args.quiet:
        print("\n".join(resolved_map(report.model)))
    groups = grouped_warnings(report.warnings, where=report.space_positions)
    for w in groups:
        print(f"warning: {w}", file=sys.stderr)
    n = report.model.n_spaces
    grouped = f" in {len(groups)} group(s)" if len(groups) < len(report.warnings) else ""
    print(f"{args.config}: valid ({n} space{'s' if n != 1 else ''}, "
          f"{len(report.model.points)} points, {len(report.warnings)} warning(s){grouped})",
          file=sys.stderr)
    unsafe = unsafe_warnings(report.warnings)
    if unsafe:
        print(f"thermowarden check: {len(unsafe)} hot-work space(s) without a heat-stress "
              "evaluation (exit code 3); the service would run, but would never alert the "
              "safety lead for them", file=sys.stderr)
        return 3
    return 0


def cmd_replay(args: argparse.Namespace) -> int:
    """Replay a recorded feed offline; print events as JSON lines (or a summary, or the
    differences two parameter sets make)."""
    from thermowarden.conditions_file import ConditionsFileError, ConditionsWriter
    from thermowarden.config import ConfigError
    from thermowarden.replay import (
        FeedError,
        ReplayResult,
        SettingError,
        compare,
        parse_setting,
        read_feed,
        replay,
        summarise,
    )

    config = _load_or_report(args.config)
    if config is None:
        return 1
    try:
        settings = dict(parse_setting(x) for x in args.set or [])
    except SettingError as exc:
        print(f"thermowarden replay: {exc}", file=sys.stderr)
        return 2
    if args.compare and not settings:
        print("thermowarden replay: --compare needs at least one --set "
              "pack.rule.parameter=value", file=sys.stderr)
        return 2
    _prepare_models()
    if args.coverage:
        return _replay_coverage(args, config)
    progress = _Progress(config.site.timezone) if sys.stderr.isatty() else None
    # plain replay prints each event as it happens; a summary or comparison needs them all
    streaming = not args.summary and not args.compare

    def emit(event: dict[str, object]) -> None:
        if progress is not None:
            progress.clear()
        print(json.dumps(event, ensure_ascii=False), flush=True)

    def run(with_settings: dict[str, float], conditions: ConditionsWriter | None,
            label: str) -> ReplayResult:
        def on_batch(engine: Any, result: ReplayResult) -> None:
            if conditions is not None:
                conditions(engine, result)

        if progress is not None:
            progress.label = label
        opener = gzip.open if args.feed.endswith(".gz") else open
        with opener(args.feed, "rt", encoding="utf-8") as fh:
            return replay(config, read_feed(fh, args.feed), base=args.config,
                          full_events=args.full, tick_s=args.tick, settings=with_settings,
                          on_batch=on_batch, on_event=emit if streaming else None,
                          on_tick=progress.update if progress is not None else None)

    writer = None
    try:
        if args.conditions:
            writer = ConditionsWriter(args.conditions, args.conditions_every)
        if args.compare:
            first = run({}, None, "A: ")
            second = run(settings, writer, "B: ")
        else:
            second = run(settings, writer, "")
        if writer is not None:
            writer.close()
    except OSError as exc:
        print(f"thermowarden replay: cannot read or write {exc.filename}: {exc.strerror}",
              file=sys.stderr)
        return 2
    except (FeedError, SettingError, ConditionsFileError) as exc:
        print(f"thermowarden replay: {exc}", file=sys.stderr)
        return 2
    except ConfigError as exc:
        _print_issues(exc)
        return 1
    finally:
        if progress is not None:
            progress.clear()
    if args.compare:
        label_b = "with " + ", ".join(f"{k}={v:g}" for k, v in settings.items())
        from thermowarden.summary_text import format_comparison

        print(format_comparison(compare(first, second), "as configured", label_b))
    elif args.summary:
        if args.json:
            json.dump(summarise(second), sys.stdout, indent=2, ensure_ascii=False)
            print()
        else:
            from thermowarden.summary_text import format_summary

            print(format_summary(summarise(second)))
    return 0


def _replay_coverage(args: argparse.Namespace, config: Any) -> int:
    """``replay --coverage``: see :func:`thermowarden.replay.replay_coverage`."""
    from thermowarden.config import ConfigError
    from thermowarden.coverage import format_coverage
    from thermowarden.replay import FeedError, read_feed, replay_coverage

    opener = gzip.open if args.feed.endswith(".gz") else open
    try:
        with opener(args.feed, "rt", encoding="utf-8") as fh:
            _, figures = replay_coverage(config, read_feed(fh, args.feed),
                                              base=args.config, tick_s=args.tick)
    except OSError as exc:
        print(f"thermowarden replay: cannot read {exc.filename}: {exc.strerror}",
              file=sys.stderr)
        return 2
    except FeedError as exc:
        print(f"thermowarden replay: {exc}", file=sys.stderr)
        return 2
    except ConfigError as exc:
        _print_issues(exc)
        return 1
    if args.json:
        json.dump(figures, sys.stdout, indent=2, ensure_ascii=False)
        print()
    else:
        print(format_coverage(figures))
    return 0


class _Progress:
    """One self-overwriting line on a terminal's stderr: feed time (site's zone), messages."""

    def __init__(self, timezone: str) -> None:
        import zoneinfo

        self.tz = zoneinfo.ZoneInfo(timezone)
        self.last = 0.0
        self.shown = False
        self.label = ""
        """Put before the line (which of two replays is running)."""

    def update(self, t: float, messages: int) -> None:
        import datetime as dt
        import time

        now = time.monotonic()
        if now - self.last < 0.2:
            return
        self.last = now
        when = dt.datetime.fromtimestamp(t, self.tz)
        sys.stderr.write(f"\r{self.label}replaying: feed time {when:%Y-%m-%d %H:%M %Z}, "
                         f"{messages:,} messages\x1b[K")
        sys.stderr.flush()
        self.shown = True

    def clear(self) -> None:
        if self.shown:
            sys.stderr.write("\r\x1b[K")
            sys.stderr.flush()
            self.shown = False


def _prepare_models() -> None:
    """Load the comfort models, saying so on stderr when they are compiled (once)."""
    from thermowarden.shell.warmup import is_compiled, say_on_stderr, warm_up

    if not is_compiled():
        warm_up(say_on_stderr)


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
    from thermowarden.shell.store import StoreError

    setup_logging(args.log_format, args.log_level)
    log = logging.getLogger("thermowarden")
    try:
        running = bootstrap(args.config, broker_url=args.broker, http_port=args.http_port,
                            state_dir=args.state_dir, shard=args.shard,
                            spaces=args.spaces.split(",") if args.spaces else None,
                            http_host=args.http_host, group=args.group,
                            instance=args.instance,
                            move_damaged_store=args.move_damaged_store)
    except ConfigError as exc:
        _print_issues(exc)
        print("thermowarden run: the configuration was refused; nothing was started",
              file=sys.stderr)
        return EXIT_CONFIG
    except StoreError as exc:
        print(f"thermowarden run: {exc}", file=sys.stderr)
        return EXIT_CONFIG
    except (OSError, ValueError) as exc:
        print(f"thermowarden run: {exc}", file=sys.stderr)
        return 1
    service = running.service

    def stop(signum: int, frame: object) -> None:
        log.info("signal %s received", signal.Signals(signum).name)
        service.request_stop()

    def reload(signum: int, frame: object) -> None:
        log.info("signal SIGHUP received: reloading the configuration")
        service.request_reload()

    signal.signal(signal.SIGTERM, stop)
    signal.signal(signal.SIGINT, stop)
    signal.signal(signal.SIGHUP, reload)
    service.run()
    if running.http is not None:
        running.http.shutdown()
    if running.web is not None:
        running.web.stop()
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    """Run the demo: embedded broker (unless --broker), service, simulator, live view."""
    from thermowarden.demo import run_demo

    view = sys.stdout.isatty() and not args.plain
    _prepare_models()
    return run_demo(args.broker, args.duration, args.speed, view, web_port=args.web_port)


def cmd_simulate(args: argparse.Namespace) -> int:
    """Publish a scenario live, or write it as a feed for replay."""
    from thermowarden.config import read_password
    from thermowarden.demo import example_site
    from thermowarden.shell.broker_nodes import parse_url
    from thermowarden.simulate import publish_live, scenario_records, write_feed

    args.config = args.config or str(example_site())
    try:
        records = scenario_records(args.scenario, args.days, args.seed)
    except ValueError as exc:
        print(f"thermowarden simulate: {exc}", file=sys.stderr)
        return 2
    if args.output:
        print(f"writing scenario {args.scenario} ({args.days} day(s)) to {args.output} ...",
              file=sys.stderr, flush=True)
        n = write_feed(records, args.output)
        print(f"{n} readings written to {args.output}", file=sys.stderr)
        return 0
    config = _load_or_report(args.config)
    if config is None:
        return 1
    host, port, _ = parse_url(args.broker or config.broker.url)
    try:
        print(f"publishing scenario {args.scenario} to {host}:{port}, {args.speed:g} times "
              "real time (Ctrl-C stops) ...", file=sys.stderr, flush=True)
        n = publish_live(records, host, port, args.protocol or config.broker.protocol,
                         args.speed, username=config.broker.username,
                         password=read_password(config.broker))
    except OSError as exc:
        print(f"thermowarden simulate: cannot reach the broker {host}:{port}: {exc}",
              file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 0
    print(f"{n} readings published", file=sys.stderr)
    return 0


def _when(text: str) -> float:
    import datetime as dt

    try:
        d = dt.datetime.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a date or ISO 8601 time") from None
    if d.tzinfo is None:
        d = d.replace(tzinfo=dt.UTC)
    return d.timestamp()


def cmd_report(args: argparse.Namespace) -> int:
    """Write the HTML report for a period."""
    import pathlib

    from thermowarden.replay import FeedError, read_feed, replay
    from thermowarden.shell.report import (
        ReportFileError,
        RuleFacts,
        ahead_figures,
        build_report,
        last_stored_time,
        render_html,
        report_destination,
        rule_facts,
        stored_events,
        stored_samples,
        write_report_file,
    )

    config = _load_or_report(args.config)
    if config is None:
        return 1
    try:  # before the work: a file that would be written over is refused at once
        out, note = report_destination(args.output,
                                       pathlib.Path(f"{config.site.id}-report.html"))
    except ReportFileError as exc:
        print(f"thermowarden report: {exc}", file=sys.stderr)
        return 2
    _prepare_models()
    if args.feed:
        opener = gzip.open if args.feed.endswith(".gz") else open
        try:
            with opener(args.feed, "rt", encoding="utf-8") as fh:
                result = replay(config, read_feed(fh, args.feed), base=args.config,
                                full_events=True, tick_s=60.0, samples=True)
        except (OSError, FeedError) as exc:
            print(f"thermowarden report: {exc}", file=sys.stderr)
            return 2
        # every event the engine raised, also those held back under a flood summary
        samples: Iterable[dict[str, Any]] = result.samples
        events = result.raised_events
        rules = RuleFacts(result.titles, result.foresees)
        start = args.start if args.start is not None else result.start
        end = args.end if args.end is not None else result.end + 1
    else:
        from thermowarden.shell.store import Store

        path = pathlib.Path(args.state_dir) / f"{config.site.id}.sqlite3"
        if not path.exists():
            print(f"thermowarden report: no store at {path} (give --state-dir or --feed)",
                  file=sys.stderr)
            return 2
        Store(path).close()  # a store this version can read (checked and migrated)
        start, end = args.start, args.end
        if end is None:  # the last day of data (or the day from --from)
            if start is not None:
                end = start + 86_400.0
            else:
                last = last_stored_time(path)
                if last is None:
                    print(f"thermowarden report: the store {path} holds no data yet",
                          file=sys.stderr)
                    return 2
                end = last + 1.0
        if start is None:
            start = end - 86_400.0
        samples = stored_samples(path, start, end)
        events = stored_events(path, start - 7 * 86_400, end)
        rules = rule_facts(config, args.config)
    if end <= start:
        print("thermowarden report: --to must be after --from", file=sys.stderr)
        return 2
    only = None
    scope = None
    if args.building:
        only = {s.id for s in config.spaces if args.building in (s.building, s.area)}
        if not only:
            known = sorted({x for s in config.spaces for x in (s.building, s.area) if x})
            print(f"thermowarden report: no space is in building or area {args.building!r} "
                  f"(known: {', '.join(known) or 'none'})", file=sys.stderr)
            return 2
        scope = (config.level_name("building", None, args.building)
                 if any(s.building == args.building for s in config.spaces)
                 else config.level_name("area", None, args.building))
    html_text = render_html(config, build_report(config, samples, events, start, end,
                                                 only=only, titles=rules.titles),
                            start, end, scope=scope, rules=rules,
                            ahead=ahead_figures(events, rules.foresees, start, end, only=only))
    try:
        write_report_file(out, html_text)
    except (ReportFileError, OSError) as exc:
        print(f"thermowarden report: {exc}", file=sys.stderr)
        return 2
    if note:
        print(f"thermowarden report: {note}", file=sys.stderr)
    print(f"report written to {out}", file=sys.stderr)
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    """Export the conditions history from the service's store to CSV or Parquet."""
    import datetime as dt
    import pathlib
    import zoneinfo

    from thermowarden.export import ExportError, format_of, write
    from thermowarden.shell.store import Store

    config = _load_or_report(args.config)
    if config is None:
        return 1
    try:
        format_of(args.output)
    except ExportError as exc:
        print(f"thermowarden export: {exc}", file=sys.stderr)
        return 2
    start, end = args.start, args.end
    if args.day is not None:
        tz = zoneinfo.ZoneInfo(config.site.timezone)
        start = dt.datetime.combine(args.day, dt.time(0), tz).timestamp()
        end = dt.datetime.combine(args.day + dt.timedelta(days=1), dt.time(0), tz).timestamp()
    if start is None or end is None or end <= start:
        print("thermowarden export: give --day, or --from and --to (--to after --from)",
              file=sys.stderr)
        return 2
    path = pathlib.Path(args.store) if args.store else \
        pathlib.Path(args.state_dir) / f"{config.site.id}.sqlite3"
    if not path.exists():
        print(f"thermowarden export: no store at {path} (give --state-dir or --store)",
              file=sys.stderr)
        return 2
    store = Store(path)
    try:
        samples = store.samples_between(start, end)
    finally:
        store.close()
    spaces = set(args.spaces.split(",")) if args.spaces else None
    try:
        n = write(samples, args.output, spaces)
    except ExportError as exc:
        print(f"thermowarden export: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        print(f"thermowarden export: cannot write {args.output}: {exc.strerror}",
              file=sys.stderr)
        return 2
    print(f"{n} row(s) written to {args.output}", file=sys.stderr)
    return 0


def _day(text: str) -> object:
    import datetime as dt

    try:
        return dt.date.fromisoformat(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a date (YYYY-MM-DD)") from None


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
    p.add_argument("--all", action="store_true",
                   help="with --format table: every row, also those that do not apply")
    p.set_defaults(func=cmd_assess)

    p = sub.add_parser("check", help="validate a site file, its CSV and rule packs")
    p.add_argument("config", metavar="SITE", help="site configuration (YAML)")
    p.add_argument("--quiet", action="store_true", help="do not print the resolved map")
    p.set_defaults(func=cmd_check)

    p = sub.add_parser("replay", help="run the rules offline over a recorded feed")
    p.add_argument("--config", required=True, metavar="SITE", help="site configuration")
    p.add_argument("feed", metavar="FEED", help="JSON lines of {t, topic, payload}")
    p.add_argument("--summary", action="store_true",
                   help="per audience and rule: notifications, advisories raised and "
                   "cleared, time active, advice followed, advice ahead of time (a table)")
    p.add_argument("--coverage", action="store_true",
                   help="per rule: whether it raised an advisory, how often, the "
                   "notifications its audience got against its allowance, and for a rule "
                   "that never raised one, why (no space with its inputs, never occupied, "
                   "its condition never held, ...); per audience: notifications against "
                   "the allowances")
    p.add_argument("--json", action="store_true",
                   help="with --summary or --coverage: print JSON, every figure")
    p.add_argument("--full", action="store_true", help="print whole event payloads")
    p.add_argument("--tick", type=float, metavar="SECONDS",
                   help="evaluation interval in feed time (default: the site's tick_s)")
    p.add_argument("--set", action="append", metavar="PACK.RULE.PARAMETER=VALUE",
                   help="change a rule parameter (or on_delay_s, off_delay_s, renotify_s) "
                   "for every space; repeatable")
    p.add_argument("--compare", action="store_true",
                   help="replay twice, as configured and with the --set values, and print "
                   "what --summary counts for both side by side (advisories per rule, "
                   "notifications per audience)")
    p.add_argument("--conditions", metavar="FILE",
                   help="write the inputs and indices of every space over time (CSV, or "
                   "Parquet when FILE ends in .parquet and pyarrow is installed)")
    p.add_argument("--conditions-every", type=float, default=60.0, metavar="SECONDS",
                   help="one conditions row per space this often in feed time (default 60)")
    p.set_defaults(func=cmd_replay)

    p = sub.add_parser("run", help="run the service on a broker (advisory only)")
    p.add_argument("--config", required=True, metavar="SITE", help="site configuration")
    p.add_argument("--broker", metavar="URL[,URL...]", help="override the site's broker "
                   "(mqtt://host:port or mqtts://host:port); several, separated by commas, "
                   "are the nodes of a clustered broker, tried in turn")
    p.add_argument("--http-port", type=int, metavar="N",
                   help="serve /healthz, /readyz and /metrics on 127.0.0.1:N")
    p.add_argument("--http-host", default="127.0.0.1", metavar="ADDRESS",
                   help="address for the HTTP endpoint (default 127.0.0.1; 0.0.0.0 in a "
                        "container)")
    p.add_argument("--state-dir", metavar="DIR",
                   help="where the SQLite store lives (default $STATE_DIRECTORY or ./state)")
    p.add_argument("--group", metavar="NAME",
                   help="share the site's spaces with the other instances of group NAME "
                        "by shard leases in the store the site file's group section names; "
                        "a standby takes a shard over when its holder stops")
    p.add_argument("--instance", metavar="NAME",
                   help="this instance's name in its group (default: the broker client id, "
                        "else <site>-<host name>); unique within the group")
    p.add_argument("--shard", type=_shard, metavar="INDEX/COUNT",
                   help="evaluate only this fixed shard of the spaces (stable hash of the "
                        "space id); superseded by --group, which moves spaces when an "
                        "instance stops")
    p.add_argument("--spaces", metavar="ID,ID", help="evaluate only these spaces")
    p.add_argument("--move-damaged-store", action="store_true",
                   help="if the store fails its check, rename it aside (*.damaged-<time>) and "
                        "start with an empty one; the site file is not touched")
    p.add_argument("--log-format", choices=("text", "json"), default="text")
    p.add_argument("--log-level", choices=("debug", "info", "warning", "error"), default="info")
    p.set_defaults(func=cmd_run)

    p = sub.add_parser("demo", help="the whole job on an invented site, in about two minutes")
    p.add_argument("--broker", metavar="URL", help="use this broker instead of an embedded one")
    p.add_argument("--duration", type=float, metavar="SECONDS",
                   help="cap the demo at this many seconds (the day runs faster)")
    p.add_argument("--speed", type=float, default=450.0,
                   help="at most this many simulated seconds per real second (default 450: a "
                        "working day in about two minutes; a busy machine takes longer)")
    p.add_argument("--plain", action="store_true",
                   help="print events line by line instead of the live view")
    p.add_argument("--web-port", type=int, metavar="N",
                   help="also serve the web page on 127.0.0.1:N, and keep it after the day "
                        "until Ctrl-C")
    p.set_defaults(func=cmd_demo)

    from thermowarden.simulate import SCENARIOS

    p = sub.add_parser("simulate", help="publish an invented scenario, or write it as a feed",
                       description="Scenarios: " + "; ".join(f"{k}: {v}"
                                                             for k, v in SCENARIOS.items()))
    p.add_argument("--config", default=None, metavar="SITE",
                   help="site whose broker to publish to (default: the example site)")
    p.add_argument("--scenario", default="larkfield-day", choices=sorted(SCENARIOS))
    p.add_argument("--broker", metavar="URL", help="override the site's broker")
    p.add_argument("--protocol", choices=("5", "3.1.1"), help="MQTT version to publish with")
    p.add_argument("--speed", type=float, default=1.0,
                   help="scenario seconds per real second (default 1: real time)")
    p.add_argument("--days", type=int, default=3, help="days of the heat-wave scenario")
    p.add_argument("--seed", type=int, help="random seed (the default gives the recorded feed)")
    p.add_argument("--output", metavar="FEED", help="write a feed file (.jsonl or .jsonl.gz) "
                   "instead of publishing")
    p.set_defaults(func=cmd_simulate)

    p = sub.add_parser("report", help="an HTML report per site and period")
    p.add_argument("--config", required=True, metavar="SITE", help="site configuration")
    p.add_argument("--from", dest="start", type=_when, metavar="WHEN",
                   help="start (ISO 8601; UTC unless an offset is given; default: a day "
                   "before --to)")
    p.add_argument("--to", dest="end", type=_when, metavar="WHEN", help="end (ISO 8601; "
                   "default: a day after --from, else the end of the stored data)")
    p.add_argument("--feed", metavar="FEED", help="report on a recorded feed instead of the "
                   "service's store")
    p.add_argument("--state-dir", default="state", metavar="DIR",
                   help="the service's state directory (default ./state)")
    p.add_argument("--output", metavar="FILE", help="HTML file to write (default "
                   "SITE-report.html; a file a report did not write is never written over)")
    p.add_argument("--building", metavar="ID", help="only the spaces of this building (or "
                   "area of the site)")
    p.set_defaults(func=cmd_report)

    p = sub.add_parser("export", help="the conditions history from the store to CSV or Parquet")
    p.add_argument("--config", required=True, metavar="SITE", help="site configuration")
    p.add_argument("output", metavar="FILE", help="FILE.csv or FILE.parquet (Parquet needs "
                   "the parquet extra)")
    p.add_argument("--day", type=_day, metavar="YYYY-MM-DD",
                   help="one calendar day in the site's time zone")
    p.add_argument("--from", dest="start", type=_when, metavar="WHEN", help="start (ISO 8601)")
    p.add_argument("--to", dest="end", type=_when, metavar="WHEN", help="end (ISO 8601)")
    p.add_argument("--spaces", metavar="ID,ID", help="only these spaces")
    p.add_argument("--state-dir", default="state", metavar="DIR",
                   help="the service's state directory (default ./state)")
    p.add_argument("--store", metavar="FILE", help="the SQLite store itself (for a shard)")
    p.set_defaults(func=cmd_export)

    p = sub.add_parser("web-user", help="add a person to the web page's users file, or print "
                       "a whole users file with them (asks for the password, or reads it "
                       "from stdin)")
    p.add_argument("name")
    p.add_argument("--audience", action="append",
                   choices=["facilities", "safety", "integrator"],
                   help="an audience whose advisories this person may act on (repeat; "
                   "none: reads only)")
    p.add_argument("--building", action="append", metavar="ID",
                   help="a building or area this person may act in (repeat; default: all)")
    p.add_argument("--file", metavar="USERS_YAML",
                   help="write to this users file: created when missing, the person added or "
                        "replaced when it exists (without it, a whole file is printed)")
    p.set_defaults(func=cmd_web_user)
    return parser


def cmd_web_user(args: argparse.Namespace) -> int:
    import getpass
    import pathlib

    from thermowarden.shell.web.users import (
        UserEntry,
        hash_password,
        load_users,
        users_yaml,
        write_private,
    )

    if sys.stdin.isatty():
        password = getpass.getpass("password: ")
        if getpass.getpass("again: ") != password:
            print("the passwords differ", file=sys.stderr)
            return 2
    else:
        password = sys.stdin.readline().rstrip("\n")
    if len(password) < 8:
        print("use a password of at least 8 characters", file=sys.stderr)
        return 2
    entry = UserEntry(name=args.name, audiences=sorted(set(args.audience or [])),
                      buildings=sorted(set(args.building)) if args.building else None,
                      password_hash=hash_password(password))
    if args.file is None:
        print(users_yaml([entry]), end="")
        return 0
    from thermowarden.config import ConfigError

    path = pathlib.Path(args.file)
    try:
        users = load_users(path) if path.exists() else {}
    except ConfigError as exc:
        print(f"{path}: not changed, it is not a valid users file:\n{exc}", file=sys.stderr)
        return 78
    replaced = entry.name in users
    users[entry.name] = entry
    write_private(path, users_yaml(list(users.values())))
    print(f"{'replaced' if replaced else 'added'} {entry.name} "
          f"({', '.join(entry.audiences)}) in {path}")
    return 0


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        code: int = args.func(args)
    except BrokenPipeError:
        # the reader went away (``| head``): stop quietly, as command-line tools do
        import os

        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141  # 128 + SIGPIPE
    return code


if __name__ == "__main__":
    sys.exit(main())
