"""The ``thermowarden`` command line.

Sub-commands:
  assess   spot check of one space: readings as JSON on stdin or --input, every index out
"""

from __future__ import annotations

import argparse
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
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    code: int = args.func(args)
    return code


if __name__ == "__main__":
    sys.exit(main())
