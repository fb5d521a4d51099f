"""The ``lagdesk`` command line: thin wrappers that parse options and call the same functions
the web pages use."""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Sequence

from app.core.errors import LagdeskError
from app.core.fitting import MAX_ORDER
from app.core.identify import EngineOptions
from app.core.portfolio_file import DEFAULT_ID_COL, DEFAULT_TIME_COL, DEFAULT_VALUE_COL, LAYOUTS, read_portfolio
from app.jobs.pool import default_workers, map_unordered
from app.jobs.progress import ProgressLine
from app.jobs.work import SeriesTask, identify_task

EXIT_INPUT_ERROR = 2


def _add_file_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("path", help="CSV file, long or wide layout")
    parser.add_argument("--layout", choices=LAYOUTS, default="long", help="long: one row per observation (default); wide: one column per series")
    parser.add_argument("--id-col", default=DEFAULT_ID_COL, help=f"series id column, long layout (default {DEFAULT_ID_COL})")
    parser.add_argument("--time-col", default=DEFAULT_TIME_COL, help=f"timestamp column (default {DEFAULT_TIME_COL})")
    parser.add_argument("--value-col", default=DEFAULT_VALUE_COL, help=f"value column, long layout (default {DEFAULT_VALUE_COL})")


def _add_workers(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--workers", type=int, default=default_workers(), help="worker processes (default: CPU count)")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="lagdesk", description="Box-Jenkins identification and review of ARIMA orders for a portfolio of series.")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")

    identify = commands.add_parser("identify", help="identify every series of a CSV file (one shot, no database)")
    _add_file_options(identify)
    identify.add_argument("--max-p", type=int, default=MAX_ORDER, help=f"largest AR order considered (default {MAX_ORDER})")
    identify.add_argument("--max-q", type=int, default=MAX_ORDER, help=f"largest MA order considered (default {MAX_ORDER})")
    identify.add_argument("--json", action="store_true", help="print the full results as JSON on stdout")
    _add_workers(identify)
    identify.set_defaults(handler=run_identify)
    return parser


def run_identify(args: argparse.Namespace) -> int:
    for name in ("max_p", "max_q"):
        if not 0 <= getattr(args, name) <= MAX_ORDER:
            raise LagdeskError(f"--{name.replace('_', '-')} must be between 0 and {MAX_ORDER}")
    portfolio = read_portfolio(args.path, args.layout, args.id_col, args.time_col, args.value_col)
    options = EngineOptions(max_p=args.max_p, max_q=args.max_q)
    tasks = [SeriesTask(s.series_id, s.values, s.lines, options) for s in portfolio.series]
    progress = ProgressLine(len(tasks), "identify")
    outcomes = {}
    for outcome in map_unordered(identify_task, tasks, args.workers):
        outcomes[outcome.series_id] = outcome
        progress.advance(failed=outcome.problem is not None)
    progress.close()
    ordered = [outcomes[t.series_id] for t in tasks]
    results = [o.result for o in ordered if o.result is not None]
    problems = [p.to_dict() for p in portfolio.problems] + [o.problem for o in ordered if o.problem is not None]
    if args.json:
        json.dump({"series": results, "problems": problems}, sys.stdout, allow_nan=False, default=_json_default)
        sys.stdout.write("\n")
    else:
        print(identify_table(results, problems))
    return 0


def _json_default(value):
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def format_order(order: Sequence[int], seasonal_order: Sequence[int] = (0, 0, 0, 0)) -> str:
    text = "ARIMA({},{},{})".format(*order)
    if seasonal_order and seasonal_order[3]:
        text += "({},{},{}){}".format(*seasonal_order)
    return text


def identify_table(results: list[dict], problems: list[dict]) -> str:
    """The readable summary: one line per series, then the problems."""
    rows = [("series", "n", "d", "suggested", "confidence", "flags")]
    for r in results:
        s = r["suggested"]
        rows.append((r["series_id"], str(r["n"]), str(r["d"]), format_order(s["order"], s["seasonal_order"]), r["confidence"], ", ".join(r["flags"]) or "-"))
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]) - 1)]
    lines = ["  ".join(cell.ljust(w) for cell, w in zip(row[:-1], widths)) + "  " + row[-1] for row in rows]
    counts = {level: sum(r["confidence"] == level for r in results) for level in ("firm", "tentative", "weak")}
    lines.append("")
    lines.append(f"{len(results)} series identified ({counts['firm']} firm, {counts['tentative']} tentative, {counts['weak']} weak); {len(problems)} could not be analysed.")
    lines += [f"  problem: {p['message']}" for p in problems]
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return args.handler(args)
    except LagdeskError as exc:
        print(f"lagdesk {args.command}: {exc}", file=sys.stderr)
        return EXIT_INPUT_ERROR
    except KeyboardInterrupt:
        print(f"lagdesk {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
