"""The ``lagdesk`` command line: thin wrappers that parse options and call the same functions
the web pages use.

The engine, the web app and the modules behind them are imported in the commands (and the
options) that use them, not here: ``lagdesk --help`` and the other commands then answer without
loading numba, statsmodels, scipy or plotly. A command's options are added only when that
command is parsed (:class:`CommandParser`), so each needs only its own imports.
"""

from __future__ import annotations

import argparse
import json
import os
import shlex
import shutil
import sqlite3
import sys
import threading
from collections.abc import Callable, Sequence
from contextlib import closing
from pathlib import Path
from typing import TYPE_CHECKING, Any

from app import __version__
from app.config import Settings
from app.core.errors import LagdeskError, OrderError
from app.core.order import MAX_ORDER, order_label
from app.core.series_ids import visible
from app.core.vocabulary import DECIDED, SAFETY_CAUTION, Confidence, VerdictStatus, reason_words
from app.jobs.executors import EXECUTORS, ExecutorChoice, default_workers, map_unordered
from app.jobs.progress import ProgressLine, Ticker

if TYPE_CHECKING:
    from app.core.analysis import Analysis, Intervention
    from app.core.portfolio_file import PortfolioFile
    from app.jobs.analyze import RunProgress
    from app.store.imports import ImportReport

# What ``lagdesk decide`` calls each verdict state a reviewer can set.
DECIDE_ACTIONS = {
    "approve": VerdictStatus.APPROVED, "override": VerdictStatus.OVERRIDDEN,
    "park": VerdictStatus.PARKED, "pending": VerdictStatus.PENDING, "not-arima": VerdictStatus.NOT_ARIMA,
}
# A file read whole whose every series was refused or could not be analysed: nothing came of it.
EXIT_NOTHING_DONE = 1
EXIT_INPUT_ERROR = 2
EXIT_STORAGE_ERROR = 3
EXIT_BROKEN_PIPE = 141  # 128 + SIGPIPE, the status of a program the signal stopped
PROG = "lagdesk"
# How many series without an analysis ``status`` and ``demo`` name, with their reasons.
NOT_ANALYSED_SHOWN = 10
DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8000
BROWSER_DELAY_SECONDS = 1.5
# What the progress line says while the first series waits on the likelihood's compile.
COMPILING = "compiling the likelihood first"
# ``lagdesk export -o -``: the export on standard output, as the convention of Unix tools has it.
STDOUT = "-"


def open_browser_later(url: str) -> None:
    """Open the dashboard in a browser once the server is up, when this machine has a desktop.

    Without a display (a server, a container) nothing is opened: a text-mode browser started
    in the same terminal would take it over. The URL is printed either way.
    """
    desktop = sys.platform in ("darwin", "win32") or os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")
    if desktop:
        import webbrowser  # here, not at the top: every other command would pay its import

        threading.Timer(BROWSER_DELAY_SECONDS, webbrowser.open, args=(url,)).start()


def lagdesk_script(
    argv0: str | None = None, executable: str | None = None, which: Callable[[str], str | None] = shutil.which,
) -> Path | None:
    """The script that runs this command line, when typing ``lagdesk`` would not run it (no
    activated virtual environment: ``.venv/bin/lagdesk`` in a fresh clone after ``make``); None
    when ``lagdesk`` on the ``PATH`` is this installation, or no script is installed.

    ``argv0`` and ``executable`` default to :data:`sys.argv` [0] and :data:`sys.executable`; run
    as ``python -m app.cli`` (or inside another program) the script is the one installed beside
    that Python.
    """
    script = Path(argv0 if argv0 is not None else sys.argv[0])
    if script.stem != PROG:
        script = Path(executable or sys.executable).parent / PROG
    found = which(PROG)
    if not script.is_file() or (found and Path(found).resolve() == script.resolve()):
        return None
    return script.absolute()


def path_as_typed(path: Path, cwd: Path | None = None) -> str:
    """A path for a command to type here: relative to the working folder when under it (with a
    directory part, so a shell runs it rather than searching the ``PATH``), quoted for a shell."""
    try:
        relative = path.relative_to(cwd or Path.cwd())
    except ValueError:
        return shlex.quote(str(path))
    return shlex.quote(str(relative) if len(relative.parts) > 1 else f"./{relative}")


def typed_command(command: str) -> str:
    """``command`` (``"analyze --db x.db"``) as a user types it here: after ``lagdesk``, or
    after the path of its script (:func:`lagdesk_script`)."""
    script = lagdesk_script()
    return f"{PROG if script is None else path_as_typed(script)} {command}"


def whole_number(text: str, minimum: int, name: str = "it", accepted: str = "a whole number", hint: str = "") -> int:
    """An option's ``text`` as a whole number of at least ``minimum``; else an error naming what
    is ``accepted`` (and a ``hint`` when the number is too small)."""
    try:
        number = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not {accepted}") from None
    if number < minimum:
        raise argparse.ArgumentTypeError(f"{name} must be at least {minimum}, not {number}{hint}")
    return number


def count_option(text: str) -> int:
    """A whole number of at least 1 (``--max-series``, ``--max-points``)."""
    return whole_number(text, 1)


def _add_file_options(parser: argparse.ArgumentParser) -> None:
    from app.core.portfolio_file import DEFAULT_ID_COL, DEFAULT_TIME_COL, DEFAULT_VALUE_COL, LAYOUTS

    parser.add_argument("path", help="CSV file, long or wide layout")
    parser.add_argument("--layout", choices=LAYOUTS, default="long", help="long: one row per observation (default); wide: one column per series")
    parser.add_argument("--id-col", default=DEFAULT_ID_COL, help=f"series id column, long layout (default {DEFAULT_ID_COL})")
    parser.add_argument("--time-col", default=DEFAULT_TIME_COL, help=f"timestamp column (default {DEFAULT_TIME_COL})")
    parser.add_argument("--value-col", default=DEFAULT_VALUE_COL, help=f"value column, long layout (default {DEFAULT_VALUE_COL})")
    parser.add_argument(
        "--date-format", metavar="FORMAT",
        help="strftime format of the dates, e.g. %%d/%%m/%%Y (default: the first timestamp's; a file whose dates read "
        "differently day first and month first is refused without it)",
    )
    parser.add_argument(
        "--max-series", type=count_option, default=Settings.max_upload_series, metavar="N",
        help=f"refuse a file with more series than this (default {Settings.max_upload_series:,}, as the upload page)",
    )
    parser.add_argument(
        "--max-points", type=count_option, default=Settings.max_upload_points, metavar="N",
        help=f"reject a series with more rows than this (default {Settings.max_upload_points:,}, as the upload page)",
    )


def read_named_file(args: argparse.Namespace) -> PortfolioFile:
    """The portfolio file the options name, read within their limits."""
    from app.core.portfolio_file import ReadLimits, read_portfolio

    return read_portfolio(
        args.path, args.layout, args.id_col, args.time_col, args.value_col,
        limits=ReadLimits(args.max_series, args.max_points), date_format=args.date_format,
    )


def _add_workers(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--workers", type=int, default=default_workers(), help="worker processes (default: CPU count)")


def _add_executor(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--executor", choices=EXECUTORS, default="local",
        help="local: a process pool on this machine (default); dask: a Dask cluster (needs lagdesk[dask])",
    )
    parser.add_argument(
        "--scheduler", metavar="tcp://HOST:PORT",
        help="with --executor dask: address of a running Dask scheduler (default: start a local cluster of --workers processes)",
    )


def executor_choice(args: argparse.Namespace) -> ExecutorChoice:
    return ExecutorChoice(args.executor, args.scheduler)


def _add_db(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--db", help="portfolio database file (default: $LAGDESK_DB, else ./lagdesk.db)")


def period_option(text: str) -> int | str | None:
    """``--period``: ``auto`` (from the sampling frequency), ``none`` (non-seasonal) or a whole number >= 2."""
    from app.core.defaults import AUTO_PERIOD

    word = text.strip().lower()
    if word == AUTO_PERIOD:
        return AUTO_PERIOD
    if word == "none":
        return None
    return whole_number(word, 2, "a seasonal period", "auto, none or a whole number", " (use none for non-seasonal)")


def _add_period(parser: argparse.ArgumentParser) -> None:
    from app.core.defaults import AUTO_PERIOD

    parser.add_argument(
        "--period", type=period_option, default=AUTO_PERIOD, metavar="N|none|auto",
        help="seasonal period: auto from the sampling frequency (default), none, or a whole number >= 2",
    )


def _add_screening(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--no-screening", dest="screening", action="store_false",
        help="fit every proposed candidate in full, also those a quick estimate puts far behind (slower)",
    )


class CommandParser(argparse.ArgumentParser):
    """A command's parser whose options are added the first time it parses (``add_options``),
    so that ``lagdesk --help`` and the other commands import nothing this command's options need."""

    def __init__(self, *args: Any, add_options: Callable[[argparse.ArgumentParser], None] | None = None, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._add_options = add_options

    def parse_known_args(self, args=None, namespace=None):
        if self._add_options is not None:
            add_options, self._add_options = self._add_options, None
            add_options(self)
        return super().parse_known_args(args, namespace)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="lagdesk", description="Box-Jenkins identification and review of ARIMA orders for a portfolio of series.")
    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=CommandParser)
    commands.add_parser("identify", help="identify every series of a CSV file (one shot, no database)", add_options=_identify_options)
    commands.add_parser("import", help="import (or update) the series of a CSV file into the database", add_options=_import_options)
    commands.add_parser("analyze", help="analyse every series whose analysis is missing or out of date", add_options=_analyze_options)
    commands.add_parser("status", help="what the portfolio database holds", add_options=_status_options)
    commands.add_parser("demo", help="build (or reuse) the analysed demo portfolio and open the dashboard on it", add_options=_demo_options)
    commands.add_parser("export", help="write the decided orders for a forecasting job (CSV or JSON)", add_options=_export_options)
    commands.add_parser("backtest", help="rolling-origin forecast check of an order on one stored series", add_options=_backtest_options)
    commands.add_parser(
        "decide", help="record a verdict on one series, or approve every pending firm suggestion (--all-firm)",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        usage="lagdesk decide SERIES_ID ACTION --reviewer NAME [--note TEXT] [--order p,d,q [--seasonal P,D,Q,s]]\n"
        "                      [--transform none|log|box_cox:LAMBDA] [--constant | --no-constant]\n"
        "                      [--intervention TIME=KIND ... | --no-interventions] [--confirm]\n"
        "                      [--version N] [--json] [--db DB]\n"
        "       lagdesk decide --all-firm [--prefix ID_PREFIX] --reviewer NAME [--note TEXT] [--json] [--db DB]",
        description="Record a verdict on one series, as the review page does: approve the suggestion, override\n"
        "it with another order (and, if you like, another transform or constant), park the series for\n"
        "later, reopen it (pending), or mark it not an ARIMA series (not-arima: intermittent or lumpy\n"
        "demand, say; the export lists it apart). With --all-firm, approve every pending series whose\n"
        "current analysis is firm (only those under --prefix).",
        epilog="examples:\n"
        "  lagdesk decide shop/sales approve --reviewer ann\n"
        "  lagdesk decide shop/sales override --order 0,1,1 --seasonal 0,1,1,12 --reviewer ann --note \"MA fits better\"\n"
        "  lagdesk decide shop/sales override --order 1,1,0 --transform log --no-constant --reviewer ann\n"
        "  lagdesk decide shop/sales override --order 1,0,0 --intervention 2024-03-04=level_shift --reviewer ann\n"
        "  lagdesk decide shop/sales pending --reviewer ann --version 3\n"
        "  lagdesk decide shop/spares not-arima --reviewer ann --note \"90% zeros: Croston\"\n"
        "  lagdesk decide --all-firm --prefix shop/ --reviewer ann\n"
        "  lagdesk decide --reviewer ann -- -shop/sales approve   (an id starting with '-': options first, then --)",
        add_options=_decide_options,
    )
    commands.add_parser("serve", help="serve the review dashboard", add_options=_serve_options)
    return parser


def _identify_options(identify: argparse.ArgumentParser) -> None:
    _add_file_options(identify)
    identify.add_argument("--max-p", type=int, default=MAX_ORDER, help=f"largest AR order considered (default {MAX_ORDER})")
    identify.add_argument("--max-q", type=int, default=MAX_ORDER, help=f"largest MA order considered (default {MAX_ORDER})")
    _add_period(identify)
    _add_screening(identify)
    identify.add_argument("--json", action="store_true", help="print the full results as JSON on stdout")
    _add_workers(identify)
    _add_executor(identify)
    identify.set_defaults(handler=run_identify)


def _import_options(load: argparse.ArgumentParser) -> None:
    _add_file_options(load)
    _add_db(load)
    load.set_defaults(handler=run_import)


def _analyze_options(analyze: argparse.ArgumentParser) -> None:
    _add_db(analyze)
    _add_workers(analyze)
    _add_executor(analyze)
    analyze.add_argument("--all", action="store_true", help="analyse every series again, current or not")
    _add_period(analyze)
    _add_screening(analyze)
    analyze.set_defaults(handler=run_analyze)


def _status_options(status: argparse.ArgumentParser) -> None:
    _add_db(status)
    status.add_argument("--json", action="store_true", help="print the counts as JSON on stdout")
    status.set_defaults(handler=run_status)


def _demo_options(demo: argparse.ArgumentParser) -> None:
    _add_db(demo)
    _add_workers(demo)
    _add_server_options(demo)
    demo.add_argument("--build-only", action="store_true", help="build the database and exit without serving")
    demo.set_defaults(handler=run_demo)


def _export_options(export: argparse.ArgumentParser) -> None:
    from app.review.export import FORMATS

    _add_db(export)
    export.add_argument("--format", choices=FORMATS, help="file format (default: the one the output file's extension names, else json)")
    export.add_argument(
        "-o", "--output",
        help=f"file to write (atomically), a folder to write lagdesk-orders.FORMAT in (default: the current folder), "
        f"or {STDOUT} for standard output (the summary line then goes to stderr)",
    )
    export.add_argument(
        "--status", default=",".join(DECIDED), metavar="LIST",
        help=f"decisions to include, comma-separated: {' or '.join(DECIDED)} or both (default {','.join(DECIDED)}); "
        "series of the other states are never exported, only counted as left out",
    )
    export.set_defaults(handler=run_export)


def _backtest_options(backtest: argparse.ArgumentParser) -> None:
    from app.core.defaults import DEFAULT_ORIGINS

    backtest.add_argument("series_id", help="the series to check")
    _add_db(backtest)
    backtest.add_argument("--order", type=integers_option(3), metavar="p,d,q", help="order to check (default: the decided order of an approved or overridden series, with its transform, constant and interventions; else the suggested one)")
    backtest.add_argument(
        "--seasonal", type=integers_option(4), metavar="P,D,Q,s", help="seasonal order (default: the decided or suggested one when --order is not given, else none)",
    )
    backtest.add_argument("--transform", metavar="none|log|box_cox:LAMBDA", type=transform_option, help="transform (default: the analysis')")
    backtest.add_argument("--horizon", type=int, help="steps ahead (default: one season of the series, or 8 when it has no period)")
    backtest.add_argument("--origins", type=int, help=f"forecast origins (default {DEFAULT_ORIGINS})")
    backtest.add_argument("--json", action="store_true", help="print the full check as JSON on stdout")
    backtest.set_defaults(handler=run_backtest)


def _decide_options(decide: argparse.ArgumentParser) -> None:
    decide.add_argument("series_id", nargs="?", metavar="SERIES_ID", help="the series to decide (not with --all-firm)")
    decide.add_argument(
        "action", nargs="?", choices=DECIDE_ACTIONS, metavar="ACTION",
        help="approve (the suggested order), override (with --order), park (set aside, optionally with --order), "
        "pending (reopen: clears the order; the history keeps every step) or not-arima (no ARIMA order suits it)",
    )
    decide.add_argument("--all-firm", action="store_true", help="approve every pending series with a firm, current analysis")
    decide.add_argument("--prefix", metavar="ID_PREFIX", help="with --all-firm: only series whose id starts with this text")
    # Checked by run_decide rather than argparse, so a missing name is one line on stderr like every other refusal.
    decide.add_argument("--reviewer", metavar="NAME", help="your name, stored with the verdict (required)")
    decide.add_argument("--note", default="", metavar="TEXT", help="why (stored with the verdict)")
    decide.add_argument("--order", type=integers_option(3), metavar="p,d,q", help="the order, for override (or park)")
    decide.add_argument(
        "--seasonal", type=integers_option(4), metavar="P,D,Q,s", help="with --order: its seasonal part (default none)",
    )
    decide.add_argument(
        "--transform", type=transform_option, metavar="none|log|box_cox:LAMBDA",
        help="with --order: the scale to fit on (default: the analysis' transform; log and Box-Cox need positive data)",
    )
    decide.add_argument(
        "--constant", dest="include_constant", action=argparse.BooleanOptionalAction, default=None,
        help="with --order: a constant (a mean undifferenced, a drift after one difference) or none "
        "(default: the engine's term for the order)",
    )
    decide.add_argument(
        "--intervention", dest="interventions", action="append", type=intervention_option, metavar="TIME=KIND",
        help="with --order: an intervention to take out, sized with the order (KIND: additive, level_shift, "
        "temporary_change); repeat for several; replaces the analysis' own (default: the analysis' own)",
    )
    decide.add_argument(
        "--no-interventions", action="store_true", help="with --order: take none of the analysis' interventions out",
    )
    decide.add_argument(
        "--confirm", action="store_true", help="save an order whose residuals fail the Ljung-Box test at 1%% anyway",
    )
    decide.add_argument(
        "--version", type=int, metavar="N",
        help="the verdict version you decided on (lagdesk decide and the API show it): refused, and nothing "
        "saved, if the verdict has changed since (default: the current version)",
    )
    _add_db(decide)
    decide.add_argument("--json", action="store_true", help="print the new verdict (or the ids approved) as JSON")
    decide.set_defaults(handler=run_decide)


def _serve_options(serve: argparse.ArgumentParser) -> None:
    _add_db(serve)
    _add_server_options(serve)
    serve.set_defaults(handler=run_serve)


def _add_server_options(parser: argparse.ArgumentParser) -> None:
    from app.web.security import GENERATE, TOKEN_ENV_VAR

    parser.add_argument("--host", default=DEFAULT_HOST, help=f"interface to listen on (default {DEFAULT_HOST}: this machine only)")
    parser.add_argument("--port", type=int, default=DEFAULT_PORT, help=f"TCP port (default {DEFAULT_PORT})")
    parser.add_argument("--no-browser", action="store_true", help="do not try to open a browser")
    parser.add_argument(
        "--token", metavar="TOKEN|generate",
        help=f"access token every request must carry; needed for any --host but loopback "
        f"(default: ${TOKEN_ENV_VAR}; '{GENERATE}' makes one and prints it once)",
    )
    parser.add_argument(
        "--allowed-host", action="append", default=[], metavar="NAME[:PORT]",
        help="another name requests may address the server by (a reverse proxy, an SSH tunnel's localhost:9000); "
        "repeat for more. Requests naming any other host are refused (DNS rebinding)",
    )


def server_settings(db_path: Path, args: argparse.Namespace) -> Settings:
    """The server's settings from the options, with its access token (generated and printed once
    when asked); refuses a non-loopback host without a token."""
    from app.web.security import GENERATE, TOKEN_ENV_VAR, generate_token, require_token_off_loopback

    token = args.token or os.environ.get(TOKEN_ENV_VAR) or None
    if token == GENERATE:
        token = generate_token()
        print(f"Access token (shown this once; give it to each reviewer): {token}", flush=True)
    try:
        settings = Settings(db_path=db_path, host=args.host, port=args.port, access_token=token,
                            allowed_hosts=tuple(args.allowed_host))
    except ValueError as exc:
        raise LagdeskError(str(exc)) from None
    require_token_off_loopback(settings)
    return settings


def _listenable(db_path: Path, args: argparse.Namespace) -> Settings:
    """The server's settings, its port checked: a port in use is refused before the command
    says it serves (or, for the demo, before it builds the portfolio)."""
    from app.web.server import check_port

    settings = server_settings(db_path, args)
    check_port(settings)
    return settings


def _serve(settings: Settings, no_browser: bool) -> int:
    from app.web.server import run_server

    print(f"Lagdesk dashboard on {settings.url} (database {settings.db_path}); Ctrl-C stops it.", flush=True)
    if not no_browser:
        open_browser_later(settings.url)
    run_server(settings)
    return 0


def run_serve(args: argparse.Namespace) -> int:
    from app.store.database import resolve_db_path

    return _serve(_listenable(resolve_db_path(args.db), args), args.no_browser)


def run_identify(args: argparse.Namespace) -> int:
    from app.core.identify import EngineOptions
    from app.jobs.work import SeriesTask, identify_task

    options = EngineOptions(max_p=args.max_p, max_q=args.max_q, period=args.period, screening=args.screening)
    portfolio = read_named_file(args)
    tasks = [SeriesTask(s.series_id, s.values, s.lines, options) for s in portfolio.series]
    progress = ProgressLine(len(tasks), "identify", waiting=compile_waiting(len(tasks)))
    outcomes = {}
    with Ticker(progress):
        for outcome in map_unordered(identify_task, tasks, args.workers, executor=executor_choice(args)):
            outcomes[outcome.series_id] = outcome
            progress.advance(failed=outcome.problem is not None)
    progress.close()
    ordered = [outcomes[t.series_id] for t in tasks]
    results = [o.result for o in ordered if o.result is not None]
    problems = [p.to_dict() for p in portfolio.problems] + [o.problem for o in ordered if o.problem is not None]
    if args.json:
        document = {"series": [r.to_dict() for r in results], "problems": problems}
        json.dump(document, sys.stdout, allow_nan=False, default=_json_default)
        sys.stdout.write("\n")
    else:
        print(identify_table(results, problems))
    return EXIT_NOTHING_DONE if problems and not results else 0


def run_import(args: argparse.Namespace) -> int:
    from app.store.database import open_database, resolve_db_path
    from app.store.imports import store_portfolio

    path = resolve_db_path(args.db)
    portfolio = read_named_file(args)  # first: a file refused whole leaves no new, empty database behind
    with closing(open_database(path)) as db:
        report = store_portfolio(db, portfolio)
    print(import_report_text(report, path))
    return EXIT_NOTHING_DONE if report.rejected and not (report.added or report.updated or report.unchanged) else 0


def import_report_text(report: ImportReport, db_path: Path) -> str:
    """The import's counts, each rejected series with its reason, and what to do next."""
    lines = [report.summary()]
    lines += [f"  rejected: {r['message']}" for r in report.rejected]
    if report.added or report.updated:
        lines.append(f"Next: {typed_command(f'analyze --db {shlex.quote(str(db_path))}')}")
    return "\n".join(map(visible, lines))


def run_analyze(args: argparse.Namespace) -> int:
    from app.core.identify import EngineOptions
    from app.jobs.analyze import run_analysis
    from app.store.database import open_database
    from app.store.status import portfolio_status

    path = _existing_db(args.db)
    shown = RunProgressLine("analyze")
    try:
        run = run_analysis(
            path, workers=args.workers, everything=args.all, options=EngineOptions(period=args.period, screening=args.screening),
            executor=executor_choice(args), on_progress=shown,
        )
    except KeyboardInterrupt:
        shown.close()  # the line ends before the message
        rest = ("the others keep their earlier analysis; run it again with --all to analyse every series again" if args.all
                else "run it again to resume")
        print(f"lagdesk analyze: interrupted; the series finished so far are kept, {rest}", file=sys.stderr)
        return 130
    finally:
        shown.close()
    with closing(open_database(path)) as db:
        status = portfolio_status(db)
    print(run_summary_text(run, shown.problems, status, shown.rechecked))
    return 0


def announce_compile() -> bool:
    """Say on stderr that the engine's first call will compile the likelihood, when it will:
    otherwise the command goes quiet for half a minute and looks hung. Whether it will."""
    from app.core import numba_cache  # loads numba: called only by commands that run the engine

    pending = numba_cache.compile_pending()
    if pending:
        print(numba_cache.COMPILE_NOTICE, file=sys.stderr, flush=True)
    return pending


def compile_waiting(total: int) -> str | None:
    """What a progress line over ``total`` series waits for first: the likelihood's compile,
    announced here, when there is work and a compile is pending; else None."""
    return COMPILING if total and announce_compile() else None


class RunProgressLine:
    """Shows a run's progress on a :class:`ProgressLine`, made once the run knows its total and
    kept ticking (:class:`Ticker`) until :meth:`close`, which may be called more than once."""

    def __init__(self, label: str) -> None:
        self.label = label
        self.line: ProgressLine | None = None
        self.ticker: Ticker | None = None
        self.problems: list[dict] = []
        self.rechecked: list[dict] = []

    def __call__(self, progress: RunProgress) -> None:
        if self.line is None:
            self.line = ProgressLine(progress.total, self.label, waiting=compile_waiting(progress.total))
            self.ticker = Ticker(self.line).start()
        while self.line.done < progress.done:
            self.line.advance(failed=self.line.failed < progress.failed)
        self.problems = progress.problems
        self.rechecked = progress.rechecked

    def close(self) -> None:
        if self.ticker is not None:
            self.ticker.stop()
            self.ticker = None
            if self.line is not None and self.line.total:
                self.line.close()


def run_summary_text(run: dict, problems: list[dict], status: dict, rechecked: Sequence[dict] = ()) -> str:
    """One line on the run, the failures' reasons, the decided series sent back to recheck with
    their reasons, one line on the portfolio."""
    if run["total"] == 0:
        lines = [f"run {run['run_id']}: nothing to analyse (use --all to analyse every series again)"]
    else:
        lines = [
            f"run {run['run_id']} {run['state']}: {run['done'] - run['failed']} series analysed, "
            f"{run['failed']} failed, in {run['duration_s']:.1f} s"
        ]
    lines += [f"  failed: {p['message']}" for p in problems]
    if rechecked:
        lines.append(f"{len(rechecked)} decided order{'s' if len(rechecked) > 1 else ''} sent back to the queue as recheck:")
        lines += _first_lines([f"{r['series_id']}: {r['reason']}" for r in rechecked], "the queue's recheck filter")
    lines.append(f"{status['analysed']} of {status['series']} series have a current analysis.")
    return "\n".join(map(visible, lines))


def run_status(args: argparse.Namespace) -> int:
    from app.jobs.run_lock import close_abandoned_runs
    from app.store.database import open_database
    from app.store.runs import latest_run
    from app.store.status import portfolio_status

    path = _existing_db(args.db)
    with closing(open_database(path)) as db:
        close_abandoned_runs(db, path)  # a run killed with kill -9 shows as interrupted, not running
        status = portfolio_status(db)
        last = latest_run(db)
    if args.json:
        json.dump({**status, "database": str(path), "last_run": last}, sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
    else:
        print(status_text(status, last, path))
    return 0


def counts_text(counts: dict[str, int]) -> str:
    """``{"weak": 3, "firm": 1}`` as ``3 weak, 1 firm``."""
    return ", ".join(f"{n} {name}" for name, n in counts.items())


def not_analysed_lines(status: dict) -> list[str]:
    """The series without an analysis and why (at most :data:`NOT_ANALYSED_SHOWN` of them),
    one indented line each, safe for a terminal."""
    from app.store.status import ANALYSIS_STAGE, IMPORT_STAGE

    stage_words = {IMPORT_STAGE: "rejected at import", ANALYSIS_STAGE: "analysis failed"}
    return _first_lines([f"{m['series_id']}: {stage_words[m['stage']]}: {m['reason']}" for m in status["not_analysed"]])


def _file_and_line(rejection: dict) -> str:
    """Where an import's rejection came from: the file, and the line when it names one."""
    return rejection["file"] + (f", line {rejection['line']}" if rejection.get("line") else "")


def _first_lines(lines: list[str], listed_by: str = "status --json") -> list[str]:
    """``lines`` indented, at most :data:`NOT_ANALYSED_SHOWN` of them and a line counting the
    rest (``listed_by`` lists them all), safe for a terminal."""
    shown = [f"  {line}" for line in lines[:NOT_ANALYSED_SHOWN]]
    if len(lines) > NOT_ANALYSED_SHOWN:
        shown.append(f"  ... and {len(lines) - NOT_ANALYSED_SHOWN} more ({listed_by} lists them all)")
    return list(map(visible, shown))


def status_text(status: dict, last: dict | None, db_path: Path) -> str:
    lines = [
        f"{db_path}: {status['series']} series",
        f"  analysed  {status['analysed']:>6}  current analysis",
        f"  stale     {status['stale']:>6}  analysis missing or out of date",
        f"  failed    {status['failed']:>6}  analysis failed on the current data",
        *([f"  earlier   {status['earlier_engine']:>6}  of these made by an earlier engine; analyze brings them up to date"]
          if status["earlier_engine"] else []),
        f"  rejected  {status['rejected']:>6}  refused by the import (too short, constant ...), so not stored",
        f"by confidence: {counts_text(status['confidence'])}",
        f"by status: {counts_text(status['verdicts'])}",
    ]
    if status["not_analysed"]:
        lines += [f"not analysed ({len(status['not_analysed'])}):", *not_analysed_lines(status)]
    refused = status["refused_updates"]
    if refused:
        lines += [f"kept their earlier data ({len(refused)}): a later import refused the new data",
                  *_first_lines([f"{r['series_id']}: {_file_and_line(r)}: {r['reason']}" for r in refused])]
    if last is not None:
        lines.append(
            f"last run: {last['run_id']}, {last['state']}, started {last['started_at']}, "
            f"{last['done']}/{last['total']} series, {last['failed']} failed, {last['duration_s']:.1f} s"
        )
    return "\n".join(lines)


def integers_option(count: int):
    """An option of ``count`` comma-separated whole numbers (``--order 1,1,0``)."""

    def parse(text: str) -> list[int]:
        from app.web.deps import whole_numbers

        try:
            return whole_numbers(text, count, "the value")
        except OrderError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    return parse


def transform_option(text: str) -> str | dict:
    """``--transform``: ``none``, ``log`` or ``box_cox:LAMBDA``."""
    word = text.strip().lower()
    if word in ("none", "log"):
        return word
    name, _, value = word.partition(":")
    try:
        if name == "box_cox":
            return {"box_cox": float(value)}
    except ValueError:
        pass
    raise argparse.ArgumentTypeError(f"expected none, log or box_cox:LAMBDA, got {text!r}")


def intervention_option(text: str) -> dict[str, str]:
    """``TIME=KIND`` (e.g. ``2024-03-04=level_shift``) as the decision service takes it."""
    timestamp, sep, kind = text.rpartition("=")
    if not sep or not timestamp.strip() or not kind.strip():
        raise argparse.ArgumentTypeError(f"expected TIME=KIND, e.g. 2024-03-04=level_shift, got {text!r}")
    return {"timestamp": timestamp.strip(), "kind": kind.strip()}


def run_decide(args: argparse.Namespace) -> int:
    from app.review.bulk import approve_firm
    from app.review.decisions import ConfirmationNeeded, OverrideNeeded, carried_interventions, decide, verdict_of
    from app.review.filters import SeriesFilter
    from app.store.database import open_database
    from app.web.deps import clean_reviewer

    reviewer = clean_reviewer(args.reviewer)  # stored as the pages and the API store it
    if not reviewer:
        raise LagdeskError("--reviewer NAME is required: every verdict records who decided it")
    if args.seasonal is not None and args.order is None:
        raise LagdeskError("--seasonal goes with --order (the seasonal part of that order)")
    if (args.transform is not None or args.include_constant is not None) and args.order is None and args.action != "approve":
        raise LagdeskError("--transform and --constant go with --order (the model they belong to)")
    if (args.interventions or args.no_interventions) and args.order is None:
        raise LagdeskError("--intervention and --no-interventions go with --order (the model they belong to)")
    if args.interventions and args.no_interventions:
        raise LagdeskError("give --intervention or --no-interventions, not both")
    interventions = [] if args.no_interventions else args.interventions
    with closing(open_database(_existing_db(args.db))) as db:
        if args.all_firm:
            if args.series_id or args.action:
                raise LagdeskError("--all-firm decides every pending firm series: give no series id or action")
            if args.order is not None or args.version is not None:
                raise LagdeskError("--all-firm approves each suggestion at its current version: give no --order, --seasonal or --version")
            done = approve_firm(db, SeriesFilter(prefix=args.prefix), reviewer, args.note)
            undo = f" (bulk approval {done.bulk_id}: the queue can undo it while none of them changes)" if done.bulk_id else ""
            _print(done.approved if args.json else visible(f"{len(done.approved)} firm suggestion{'' if len(done.approved) == 1 else 's'} approved" + (
                f" under {args.prefix!r}" if args.prefix else "") + undo), args.json)
            if done.approved:
                print(f"Caution: {SAFETY_CAUTION}", file=sys.stderr)
            return 0
        if not (args.series_id and args.action):
            raise LagdeskError("give a series id and an action (approve, override, park, pending, not-arima), or --all-firm")
        if args.prefix:
            raise LagdeskError("--prefix goes with --all-firm")
        if args.action in ("pending", "not-arima") and args.order is not None:
            raise LagdeskError(f"{args.action} clears the series' order: give no --order")
        if args.action == "override" and args.order is None:
            raise LagdeskError("override needs the order: --order p,d,q (and --seasonal P,D,Q,s for a seasonal part)")
        version = args.version if args.version is not None else verdict_of(db, args.series_id)["version"]
        try:
            verdict = decide(
                db, args.series_id, status=DECIDE_ACTIONS[args.action], order=args.order, seasonal_order=args.seasonal,
                note=args.note, reviewer=reviewer, version=version, transform=args.transform,
                include_constant=args.include_constant, interventions=interventions, confirm=args.confirm,
            )
        except ConfirmationNeeded as exc:
            raise LagdeskError(f"{exc} with --confirm") from None
        except OverrideNeeded as exc:
            raise LagdeskError(f"{exc}; what you gave, as an override: {override_command(args.argv, args.series_id)}") from None
        carried = carried_interventions(db, args.series_id, verdict)
    _print(verdict if args.json else verdict_line(args.series_id, verdict, carried), args.json)
    if verdict["status"] in DECIDED:
        print(f"Caution: {SAFETY_CAUTION}", file=sys.stderr)
    return 0


def override_command(argv: Sequence[str], series_id: str) -> str:
    """The ``decide SERIES_ID approve ...`` command line ``argv`` (after the program) as the same
    command with the action ``override``, every other argument as given, ready to paste."""
    words = list(argv)
    action = next(i for i, word in enumerate(words) if i > words.index(series_id) and word == "approve")
    words[action] = "override"
    return typed_command(shlex.join(words))


def verdict_line(series_id: str, verdict: dict, carried: Sequence[Intervention] = ()) -> str:
    """A verdict in one line: series, status, order with its scale, constant and interventions
    when the reviewer set them, version; then, on a line of their own, the analysis' own
    interventions the order takes out of the series (``carried``), which the export hands on."""
    from app.review.decisions import model_words

    words = model_words(verdict)
    order = f" {order_label(verdict['order'], verdict['seasonal_order'])}{f' ({words})' if words else ''}" if verdict["order"] else ""
    line = visible(f"{series_id}: {verdict['status']}{order} (version {verdict['version']}, by {verdict['reviewer'] or 'unknown'})")
    if carried:
        line += "\n  " + visible("with the analysis' interventions, which the export hands on: " + "; ".join(
            f"{i.kind.words()} at {i.timestamp}" for i in carried))
    return line


def _print(value: object, as_json: bool) -> None:
    if as_json:
        json.dump(value, sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
    else:
        print(value)


def run_export(args: argparse.Namespace) -> int:
    from app.review.export import export_command

    if args.output == STDOUT:
        from app.review.export import export_to_stream

        sys.stdout.flush()
        print(export_to_stream(_existing_db(args.db), sys.stdout.buffer, args.format or "json", args.status), file=sys.stderr)
        return 0
    print(export_command(_existing_db(args.db), args.format, args.output, args.status))
    return 0


def run_backtest(args: argparse.Namespace) -> int:
    from app.review.forecast_check import backtest_series
    from app.store.database import open_database

    path = _existing_db(args.db)
    announce_compile()
    with closing(open_database(path)) as db:
        check = backtest_series(db, args.series_id, args.order, args.seasonal, args.transform, args.horizon, args.origins,
                                any_order=True)
    if args.json:
        json.dump(check, sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
    else:
        print(backtest_text(check))
    return 0


def backtest_text(check: dict) -> str:
    """The forecast check in a few lines: MASE against the seasonal naive forecast, coverage,
    and the error by step ahead."""

    def number(value: float | None) -> str:
        return "n/a" if value is None else f"{value:.3f}"

    lines = [
        f"{visible(check['series_id'])}: {check['label']}, transform {json.dumps(check['transform'])}, "
        f"horizon {check['horizon']}, {check['origins']} origins (refitted at each)",
        f"  MASE {number(check['mase'])}   seasonal naive MASE {number(check['naive_mase'])} (m={check['m']})",
        "  interval coverage: " + ", ".join(f"{level}% -> {share:.0%}" for level, share in check["coverage"].items()),
        "  step   MAE        MASE",
    ]
    lines += [f"  {row['step']:>4}   {row['mae']:<10.4g} {row['mase']:.3f}" for row in check["by_horizon"]]
    lines += [f"  note: {note}" for note in check["notes"]]
    return "\n".join(lines)


def run_demo(args: argparse.Namespace) -> int:
    from app.jobs.demo import build_demo_database
    from app.store.database import open_database, resolve_db_path
    from app.store.status import portfolio_status

    path = resolve_db_path(args.db)
    settings = None if args.build_only else _listenable(path, args)
    shown = RunProgressLine("demo")
    try:
        build_demo_database(
            path, args.workers, on_progress=shown,
            on_import=lambda report: print(visible(report.summary()), flush=True),
        )
    finally:
        shown.close()
    with closing(open_database(path)) as db:
        status = portfolio_status(db)
    print(demo_next_steps(path, status, serving=settings is not None))
    return 0 if settings is None else _serve(settings, args.no_browser)


def demo_next_steps(db_path: Path, status: dict, serving: bool = True) -> str:
    """What the demo holds (by confidence), the series it could not analyse and why, and the
    commands to go on with, as typed here (:func:`typed_command`); ``serving`` when the demo
    goes on to serve the dashboard itself."""
    db = shlex.quote(str(db_path))
    steps = [
        (typed_command(f"serve --db {db}"), "review it in the browser" + (" (the demo does this now)" if serving else "")),
        (typed_command(f"status --db {db}"), "what the portfolio holds"),
        (typed_command("import YOUR.csv --db my.db"), "bring in your own series (series_id,timestamp,value)"),
        (typed_command("analyze --db my.db"), "and analyse them"),
    ]
    width = max(len(command) for command, _ in steps)
    lines = [visible(
        f"Demo portfolio ready in {db_path}: {status['series']} series, {status['analysed']} analysed "
        f"({counts_text(status['confidence'])})."
    )]
    missing = status["not_analysed"]
    if missing:
        lines += [f"{len(missing)} could not be analysed; the queue lists them as not analysed, with the reason:",
                  *not_analysed_lines(status)]
    kept = sum(n for state, n in status["verdicts"].items() if state != VerdictStatus.PENDING)
    if kept:
        lines.append(f"{kept} decision{'s' if kept > 1 else ''} from earlier runs kept; delete {db} to start afresh.")
    lines += ["Next:", *(visible(f"  {command.ljust(width)}  {what}") for command, what in steps)]
    script = lagdesk_script()
    if script is not None and (script.parent / "activate").is_file():
        lines.append(f"(Or run 'source {path_as_typed(script.parent / 'activate')}' once and type just {PROG}.)")
    return "\n".join(lines)


def _existing_db(explicit: str | None) -> Path:
    """The database to read; unlike import, these commands never create an empty one."""
    from app.store.database import resolve_db_path

    path = resolve_db_path(explicit)
    if not path.is_file():
        raise LagdeskError(f"{path}: no such database; create it with {typed_command(f'import PATH --db {shlex.quote(str(path))}')}")
    return path


def _json_default(value):
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def identify_table(results: list[Analysis], problems: list[dict]) -> str:
    """The readable summary: one line per series (with the main reason for its confidence, in
    the queue's words, when it is not firm), then the problems."""
    from app.store.analyses import main_reason

    def why(analysis: Analysis) -> str:
        reason = main_reason(analysis)
        return "-" if analysis.confidence == Confidence.FIRM or reason is None else reason_words(reason)

    rows = [("series", "n", "d", "suggested", "transform", "confidence", "flags", "main reason")]
    for r in results:
        rows.append((
            visible(r.series_id), str(r.n), str(r.d), r.suggested.full_label, r.transform.name(), str(r.confidence),
            ", ".join(r.flags) or "-", visible(why(r)),
        ))
    widths = [max(len(row[i]) for row in rows) for i in range(len(rows[0]) - 1)]
    lines = ["  ".join(cell.ljust(w) for cell, w in zip(row[:-1], widths)) + "  " + row[-1] for row in rows] if results else []
    counts = ", ".join(f"{sum(r.confidence == level for r in results)} {level}" for level in Confidence)
    lines += [""] if results else []
    lines.append(f"{len(results)} series identified ({counts}); {len(problems)} could not be analysed.")
    lines += [visible(f"  problem: {p['message']}") for p in problems]
    return "\n".join(lines)


def main(argv: Sequence[str] | None = None) -> int:
    try:
        return _run(build_parser(), argv)
    except BrokenPipeError:
        # The reader went away (``lagdesk status | head``): as a program killed by SIGPIPE does,
        # stop without a word. What is still buffered goes to /dev/null, so that the flush at exit
        # does not raise again (the recipe of Python's signal module documentation, "Note on SIGPIPE").
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return EXIT_BROKEN_PIPE


def _run(parser: argparse.ArgumentParser, argv: Sequence[str] | None) -> int:
    args = parser.parse_args(argv)
    args.argv = list(sys.argv[1:] if argv is None else argv)
    try:
        return args.handler(args)
    except BrokenPipeError:
        raise
    except LagdeskError as exc:
        print(visible(f"lagdesk {args.command}: {exc}"), file=sys.stderr)
        return EXIT_INPUT_ERROR
    except sqlite3.Error as exc:
        from app.store.database import resolve_db_path, storage_error_text

        db = resolve_db_path(args.db) if "db" in vars(args) else None
        print(visible(f"lagdesk {args.command}: {storage_error_text(exc, db)}"), file=sys.stderr)
        return EXIT_STORAGE_ERROR
    except OSError as exc:  # a full disk or a missing permission outside the database
        where = f"{exc.filename}: " if exc.filename else ""
        print(visible(f"lagdesk {args.command}: {where}{exc.strerror or exc}"), file=sys.stderr)
        return EXIT_STORAGE_ERROR
    except KeyboardInterrupt:
        print(f"lagdesk {args.command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
