"""The ``foldsift`` command line. Textual is imported only by ``review``."""

from __future__ import annotations

import argparse
import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

# Only light modules here: the heavy ones (polars, scipy, Textual) are imported by the
# command that needs them, so `foldsift --help` starts at once.
from foldsift.stats.defaults import (
    DEFAULT_BAND,
    DEFAULT_MAX_COMPARISONS,
    DEFAULT_RESAMPLES,
    DUPLICATE_POLICIES,
    Reference,
    parse_band,
)
from foldsift.stats.errors import InputError
from foldsift.stats.vocabulary import (
    CENSORED_POLICIES,
    FAMILIES,
    NONPOSITIVE_POLICIES,
    PAIRS,
    SQL_DIALECTS,
    TESTS,
)

from .choices import COLUMN_SETS, DEFAULT_DIGITS, MAX_DIGITS, SELECTIONS, Selection

if TYPE_CHECKING:
    from foldsift.stats.long import LongOptions
    from foldsift.stats.scan import ScanResult, ScanSettings

    from .export import ExportForm
    from .session import SessionOptions

EXIT_BAD_INPUT = 2


def _band(text: str) -> tuple[float, float]:
    try:
        return parse_band(text)
    except ValueError as error:
        raise argparse.ArgumentTypeError(str(error)) from None


def _confidence(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; use e.g. 0.95") from None
    if not 0.5 <= value < 1:
        raise argparse.ArgumentTypeError(f"{text}: give a level between 0.5 and 1, e.g. 0.95")
    return value


def _reference(text: str) -> Reference:
    try:
        return Reference.parse(text)
    except ValueError as error:
        raise argparse.ArgumentTypeError(str(error)) from None


def _resamples(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; use e.g. 2000") from None
    if value < 200:
        raise argparse.ArgumentTypeError(f"{text}: BCa intervals need at least 200 resamples")
    return value


def _ratio(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; use e.g. 1.5") from None
    if not value > 0 or value == 1:
        raise argparse.ArgumentTypeError(f"{text}: the target ratio must be positive and not 1")
    return value


def _whole_number(text: str) -> int:
    try:
        value = int(text.replace("_", "").replace(",", ""))
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"{text!r} is not a whole number; use e.g. 500000"
        ) from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text}: give at least 1")
    return value


def add_scan_options(parser: argparse.ArgumentParser, *, data_required: bool = True) -> None:
    if data_required:
        parser.add_argument("data", type=Path, help="CSV, TSV or Parquet file, one row per sample")
    else:
        parser.add_argument(
            "data", type=Path, nargs="?", help="CSV, TSV or Parquet file (default: the demo data)"
        )
    roles = parser.add_argument_group("columns")
    roles.add_argument("--group", action="append", metavar="COL", help="grouping column (repeat)")
    roles.add_argument("--outcome", action="append", metavar="COL", help="outcome column (repeat)")
    roles.add_argument(
        "--within",
        metavar="COL",
        help="compare inside each level of this grouping column (strata), not pooled over it",
    )
    roles.add_argument(
        "--max-comparisons",
        type=_whole_number,
        default=DEFAULT_MAX_COMPARISONS,
        metavar="N",
        help=f"refuse a scan of more comparisons than N (default {DEFAULT_MAX_COMPARISONS:,})",
    )
    reading = parser.add_argument_group("reading the file")
    reading.add_argument(
        "--encoding",
        metavar="NAME",
        help="text encoding of the file, e.g. utf-8, cp1252, latin-1 (default: UTF-8, "
        "else Windows-1252 when every byte fits it)",
    )
    reading.add_argument(
        "--decimal",
        choices=("comma", "point"),
        help="the decimal mark of every column, where the entries leave it open (1,234)",
    )
    _add_long_options(parser.add_argument_group("long tables (one row per sample × analyte)"))
    _add_method_options(parser.add_argument_group("method"))


def _add_long_options(long: argparse._ArgumentGroup) -> None:
    for option, what in (
        ("--analyte", "what was measured (with --result: read the table as long)"),
        ("--result", "the measured value"),
        ("--unit", "the unit of each result"),
        ("--qualifier", "laboratory qualifier or detection condition (<, U, J, R, ND, ...)"),
        ("--limit", "the detection or reporting limit of each row"),
        ("--sample", "the sample identifier: rows of one sample share its groupings"),
    ):
        long.add_argument(option, metavar="COL", help=f"column: {what}")
    long.add_argument(
        "--duplicates",
        choices=DUPLICATE_POLICIES,
        default="mean-log",
        help="several results for one sample and analyte: geometric mean (default), the "
        "first, or refuse",
    )
    long.add_argument(
        "--wide",
        action="store_true",
        help="never read the table as long, even when its column names look like it",
    )


def _long_options(args: argparse.Namespace) -> LongOptions:
    from foldsift.stats.long import LongOptions

    try:
        return LongOptions(
            analyte=args.analyte,
            result=args.result,
            unit=args.unit,
            qualifier=args.qualifier,
            limit=args.limit,
            sample=args.sample,
            duplicates=args.duplicates,
            recognise=not args.wide,
        )
    except ValueError as error:
        raise InputError(str(error)) from None


def _add_method_options(method: argparse._ArgumentGroup) -> None:
    method.add_argument(
        "--pairs",
        choices=PAIRS,
        default=None,
        help="all pairs of levels, or each level against a reference (default: all, or reference when --reference is given)",
    )
    method.add_argument(
        "--reference",
        action="append",
        type=_reference,
        default=[],
        metavar="LEVEL",
        help="reference level (denominator) for --pairs reference; LEVEL or GROUPING=LEVEL (repeat)",
    )
    method.add_argument("--test", choices=TESTS, default="welch", help="t-test on the logs")
    method.add_argument(
        "--confidence",
        type=_confidence,
        default=0.95,
        metavar="LEVEL",
        help="CI level (default 0.95)",
    )
    method.add_argument(
        "--nonpositive",
        choices=NONPOSITIVE_POLICIES,
        default="exclude",
        help="zeros and negatives: leave out (default) or replace by half the smallest positive value",
    )
    method.add_argument(
        "--censored",
        choices=CENSORED_POLICIES,
        default="mle",
        help=(
            "entries like <0.5: fit by censored maximum likelihood at their limits (mle, "
            "default), leave out (exclude), or replace by DL/2 (half-dl) or DL/sqrt(2) "
            "(dl-root2)"
        ),
    )
    method.add_argument(
        "--family",
        choices=FAMILIES,
        default="scan",
        help="family for Holm and BH adjustment (default: the whole scan)",
    )
    method.add_argument(
        "--band",
        type=_band,
        default=DEFAULT_BAND,
        metavar="LOW,HIGH",
        help="ratio band of no practical difference, judged with the 90%% CI (default 0.80,1.25)",
    )
    _add_design_options(method)
    method.add_argument(
        "--target-ratio",
        type=_ratio,
        metavar="R",
        help="also report the n per group needed to detect ratio R",
    )


def _add_design_options(method: argparse._ArgumentGroup) -> None:
    method.add_argument(
        "--pair-by",
        metavar="COL",
        help="the unit measured at several levels (well, patient, plot): compare levels "
        "within units by a paired t on the logs (several values of a unit at one level: "
        "their geometric mean, or refused with --duplicates refuse)",
    )
    method.add_argument(
        "--period", metavar="COL", help="2x2 crossover: the period column (with --sequence)"
    )
    method.add_argument(
        "--sequence",
        metavar="COL",
        help="2x2 crossover: the sequence column (with --period and --pair-by the subject)",
    )


def settings_from(args: argparse.Namespace) -> ScanSettings:
    from foldsift.stats.policy import ValuePolicy
    from foldsift.stats.scan import ScanSettings

    return ScanSettings(
        # Naming a reference level asks for comparisons against it.
        pairs=args.pairs or ("reference" if args.reference else "all"),
        reference=tuple(args.reference),
        test=args.test,
        confidence=args.confidence,
        policy=ValuePolicy(nonpositive=args.nonpositive, censored=args.censored),
        family=args.family,
        band=args.band,
        target_ratio=args.target_ratio,
        within=args.within,
        max_comparisons=args.max_comparisons,
        pair_by=args.pair_by,
        pair_duplicates="refuse" if args.duplicates == "refuse" else "mean-log",
        period=args.period,
        sequence=args.sequence,
    )


def data_path(args: argparse.Namespace) -> Path:
    if args.data is not None:
        path: Path = args.data
        return path
    from foldsift.demo.generate import demo_path

    return demo_path()


def options_from(args: argparse.Namespace) -> SessionOptions:
    """The typed options of a session from the parsed command line."""
    from foldsift.stats.load import ReadOptions

    from .session import SessionOptions

    return SessionOptions(
        data_path=data_path(args),
        settings=settings_from(args),
        groupings=tuple(args.group) if args.group else None,
        outcomes=tuple(args.outcome) if args.outcome else None,
        summary=bool(getattr(args, "summary", False)),
        reviews_path=getattr(args, "reviews", None),
        resamples=getattr(args, "resamples", DEFAULT_RESAMPLES),
        allow_formulas=bool(getattr(args, "allow_formulas", False)),
        reading=ReadOptions(encoding=args.encoding, decimal=args.decimal),
        long=_long_options(args),
    )


#: Seconds of silence after which long work reports that it is still going.
PROGRESS_AFTER = 2.0


class Stage:
    """What a long run is doing now, as the scan says it (``scan(options, stage.set)``)."""

    def __init__(self, what: str) -> None:
        self.what = what

    def set(self, what: str) -> None:
        self.what = what


#: ``--quiet``: no progress lines (set by ``main``).
QUIET = threading.Event()


@contextmanager
def _progress(what: str, every: float | None = None) -> Iterator[Stage]:
    """Say on stderr, every few seconds, what a run is doing (its stage, as the scan reports
    it); silent when it ends sooner, so quick runs print nothing more, and with --quiet."""
    done = threading.Event()
    start = time.monotonic()
    pause = PROGRESS_AFTER if every is None else every
    stage = Stage(what)

    def report() -> None:
        while not done.wait(pause):
            if QUIET.is_set():
                continue
            print(
                f"foldsift: still {stage.what} ({time.monotonic() - start:.0f} s)",
                file=sys.stderr,
                flush=True,
            )

    reporter = threading.Thread(target=report, daemon=True)
    reporter.start()
    try:
        yield stage
    finally:
        done.set()
        reporter.join()


def _fail(message: str) -> int:
    print(f"foldsift: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT


def _check_out(path: Path | None, args: argparse.Namespace) -> None:
    """Refuse an output path before any work: a missing folder, a folder, the input data,
    or an existing file without --overwrite."""
    if path is None:
        return
    if not path.parent.exists():
        raise InputError(
            f"{path}: folder {path.parent} does not exist; create it or choose another"
        )
    if path.is_dir():
        raise InputError(f"{path}: is a folder; give a file name for the CSV")
    data = data_path(args)
    if path.exists() and data.exists() and path.resolve().samefile(data):
        raise InputError(f"{path}: is the input data file; choose another name for the CSV")
    if path.exists() and not args.overwrite:
        raise InputError(f"{path} exists; add --overwrite to replace it")


def _guarded_write(args: argparse.Namespace, write: Callable[[], int]) -> int:
    """Run one atomic CSV write (``write`` returns the rows written); one-line errors."""
    try:
        rows = write()
    except FileExistsError:
        return _fail(f"{args.out} exists; add --overwrite to replace it")
    except OSError as error:
        reason = error.strerror or str(error)
        return _fail(f"{args.out}: cannot be written ({reason}); nothing was changed")
    print(
        f"foldsift: wrote {rows} rows to {args.out} (settings in {args.out}.settings.json)",
        file=sys.stderr,
    )
    return 0


def _describe(result: ScanResult) -> None:
    source = result.source
    if source.kind == "summary table":
        print(
            f"foldsift: {source.name}: summary table, {len(source.groupings)} grouping(s), "
            f"{len(source.outcomes)} outcome(s), {result.comparisons.height} comparisons "
            "(medians, normality checks and cross-checks need raw values)",
            file=sys.stderr,
        )
        return
    for note in source.notes:
        if note.startswith("read as a long table"):
            print(f"foldsift: {source.name}: {note}", file=sys.stderr)
    print(
        f"foldsift: {source.name}: {len(source.groupings)} grouping column(s) "
        f"({', '.join(source.groupings)}), {len(source.outcomes)} outcome(s), "
        f"{result.comparisons.height} comparisons; {_policies_applied(result)}",
        file=sys.stderr,
    )
    for name, count in source.unparsed.items():
        print(
            f"foldsift: warning: {name}: {count} entries were not numbers and were read as missing",
            file=sys.stderr,
        )
    for note in source.notes:
        if not note.startswith("read as a long table"):
            print(f"foldsift: note: {note}", file=sys.stderr)


def _policies_applied(result: ScanResult) -> str:
    """The value policies that met entries in this data, in words."""
    summaries = result.summaries
    found = {
        name: bool(summaries[name].fill_null(0).sum() > 0) if name in summaries.columns else True
        for name in ("n_excluded", "n_substituted", "n_censored", "n_above_range")
    }
    censored = found["n_censored"] or found["n_above_range"]
    # Zero/negative values are the excluded or substituted entries that were not censored.
    nonpositive = found["n_excluded"] or found["n_substituted"]
    return result.settings.policy.describe(nonpositive=nonpositive, censored=censored)


def command_scan(args: argparse.Namespace) -> int:
    from foldsift.stats.robust import robust_all
    from foldsift.stats.sentence import sentence_column

    from .export import csv_text, write_export
    from .session import scan

    _check_out(args.out, args)
    options = options_from(args)
    if args.robust and options.summary:
        return _fail(f"{args.data}: --robust needs raw values; a summary table has none")
    with _progress(f"reading and scanning {options.data_path.name}") as stage:
        result = scan(options, stage.set)
    _describe(result)
    comparisons = result.comparisons
    if args.robust:
        comparisons = robust_all(result, resamples=args.resamples, progress=_progress_bar)
        print(file=sys.stderr)
    comparisons = comparisons.with_columns(sentence_column(comparisons))
    if args.out is None:
        sys.stdout.write(csv_text(comparisons, allow_formulas=args.allow_formulas).write_csv())
        return 0
    metadata = result.metadata() | {"rows_chosen": "all", "cross_checks": bool(args.robust)}

    def write() -> int:
        write_export(
            comparisons,
            args.out,
            metadata,
            overwrite=args.overwrite,
            protect=[options.data_path],
            allow_formulas=args.allow_formulas,
        )
        return comparisons.height

    return _guarded_write(args, write)


def _progress_bar(done: int, total: int) -> None:
    if not sys.stderr.isatty():
        if done == total or done % max(total // 10, 1) < 10:
            print(f"robust checks {done}/{total}", file=sys.stderr, flush=True)
        return
    width = 30
    filled = width * done // max(total, 1)
    print(
        f"\rrobust checks [{'#' * filled}{'.' * (width - filled)}] {done}/{total}",
        end="",
        file=sys.stderr,
        flush=True,
    )


def command_review(args: argparse.Namespace) -> int:
    from foldsift.tui.app import FoldsiftApp

    app = FoldsiftApp(options_from(args), robust_on_open=args.robust)
    app.run()
    if app.error_text:
        print(f"foldsift: {app.error_text}", file=sys.stderr)
    return app.return_code or 0


def _export_selection(args: argparse.Namespace) -> Selection:
    if args.all:
        return "all"
    if args.rows is not None:
        rows: Selection = args.rows
        return rows
    return "shown" if args.filter else "flagged"


def _export_form(args: argparse.Namespace) -> ExportForm:
    """The form of the CSV: ``--columns``, ``--digits`` (short form only), ``--bom``."""
    from .export import ExportForm

    if args.columns == "full" and args.digits is not None:
        raise InputError("--digits rounds the short export; --columns full keeps full precision")
    digits = DEFAULT_DIGITS if args.digits is None else args.digits
    return ExportForm(columns=args.columns, digits=digits, bom=args.bom)


def command_export(args: argparse.Namespace) -> int:
    from .session import ReviewSession

    form = _export_form(args)
    _check_out(args.out, args)
    options = options_from(args)
    which = _export_selection(args)
    if which in ("flagged", "decided") and not options.review_file.exists():
        return _fail(
            f"{options.review_file}: no review file yet, so nothing is {which}; review the data "
            "first, give --reviews PATH, or export --rows all"
        )
    with _progress(f"reading and scanning {options.data_path.name}") as stage:
        session = ReviewSession.open_to_read(options, stage.set)
    try:
        error = session.set_filter(args.filter or "")
        if error:
            return _fail(f"--filter: {error}")
        if args.robust:
            if not session.can_cross_check:
                return _fail(f"{args.data}: --robust needs raw values; a summary table has none")
            session.cross_check(session.selection(which), progress=_progress_bar)
            print(file=sys.stderr)
        _say_unmatched(session.unmatched_reviews, options.review_file)
        return _guarded_write(
            args,
            lambda: session.export(args.out, which, overwrite=args.overwrite, form=form).rows,
        )
    finally:
        session.close()


def _say_unmatched(keys: list[str], path: Path) -> None:
    if keys:
        shown = ", ".join(keys[:3]) + (" …" if len(keys) > 3 else "")
        print(
            f"foldsift: {len(keys)} review(s) in {path} match no comparison of this data "
            f"(kept in the file): {shown}",
            file=sys.stderr,
        )


class _Parser(argparse.ArgumentParser):
    """Usage errors as one line, like every other foldsift error (exit status 2)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_BAD_INPUT, f"foldsift: {message} (see '{self.prog} --help')\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="foldsift",
        description="Compare groups on many positive, right-skewed measurements on the log scale.",
    )
    commands = parser.add_subparsers(
        dest="command", required=True, metavar="COMMAND", parser_class=_Parser
    )
    _add_scan_command(commands.add_parser("scan", help="compute every comparison and write CSV"))
    _add_review_command(commands.add_parser("review", help="open the full-screen review app"))
    _add_export_command(
        commands.add_parser("export", help="write reviewed rows to CSV without the app")
    )
    _add_summary_sql_command(
        commands.add_parser(
            "summary-sql", help="print the SQL that summarises the data where it lives"
        )
    )
    _add_summary_merge_command(
        commands.add_parser(
            "summary-merge", help="merge summary tables of partitions into one (CSV)"
        )
    )
    return parser


def _add_quiet(command: argparse.ArgumentParser) -> None:
    command.add_argument(
        "--quiet",
        action="store_true",
        help="no progress lines on stderr (a long run says what it is doing every 2 s)",
    )


def _add_scan_command(scan: argparse.ArgumentParser) -> None:
    add_scan_options(scan)
    _add_quiet(scan)
    scan.add_argument("--overwrite", action="store_true", help="replace FILE.csv if it exists")
    _add_formula_option(scan)
    scan.add_argument("--out", type=Path, metavar="FILE.csv", help="write here instead of stdout")
    scan.add_argument(
        "--summary",
        action="store_true",
        help="DATA is a summary table: grouping, level, outcome, n, mean_log, sd_log per group",
    )
    scan.add_argument(
        "--robust",
        action="store_true",
        help="add bootstrap and Hodges-Lehmann cross-checks (slower)",
    )
    scan.add_argument(
        "--resamples",
        type=_resamples,
        default=DEFAULT_RESAMPLES,
        metavar="N",
        help=f"bootstrap resamples (default {DEFAULT_RESAMPLES})",
    )


def _add_review_command(review: argparse.ArgumentParser) -> None:
    add_scan_options(review, data_required=False)
    _add_formula_option(review)
    review.add_argument(
        "--reviews", type=Path, metavar="PATH", help="review file (default: beside the data)"
    )
    review.add_argument(
        "--robust",
        action="store_true",
        help="cross-check every comparison in the background after opening (progress shown)",
    )


def _add_export_command(export: argparse.ArgumentParser) -> None:
    _add_quiet(export)
    add_scan_options(export, data_required=False)
    export.add_argument(
        "--reviews", type=Path, metavar="PATH", help="review file (default: beside the data)"
    )
    export.add_argument(
        "--rows",
        choices=SELECTIONS,
        help="which rows: flagged (default), decided, shown (those --filter keeps) or all",
    )
    export.add_argument("--all", action="store_true", help="all rows (the same as --rows all)")
    export.add_argument(
        "--filter",
        metavar="WORDS",
        help="the review list's filter words, e.g. 'copper q<0.05 -warned' (implies --rows shown)",
    )
    export.add_argument(
        "--robust",
        action="store_true",
        help="cross-check the exported rows first (bootstrap and Hodges-Lehmann)",
    )
    export.add_argument(
        "--resamples",
        type=_resamples,
        default=DEFAULT_RESAMPLES,
        metavar="N",
        help=f"bootstrap resamples (default {DEFAULT_RESAMPLES})",
    )
    export.add_argument("--out", type=Path, required=True, metavar="FILE.csv")
    export.add_argument("--overwrite", action="store_true", help="replace FILE.csv if it exists")
    _add_formula_option(export)
    _add_form_options(export)


def _digits(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number; use e.g. 4") from None
    if not 1 <= value <= MAX_DIGITS:
        raise argparse.ArgumentTypeError(f"{text}: give 1 to {MAX_DIGITS} significant digits")
    return value


def _add_form_options(export: argparse.ArgumentParser) -> None:
    form = export.add_argument_group("the CSV's form")
    form.add_argument(
        "--columns",
        choices=COLUMN_SETS,
        default="short",
        help="short (default): the columns a colleague reads, numbers rounded, each note on "
        "one line; full: every column at full precision",
    )
    form.add_argument(
        "--digits",
        type=_digits,
        metavar="N",
        help=f"significant digits of the short export's numbers (default {DEFAULT_DIGITS})",
    )
    form.add_argument(
        "--bom",
        action="store_true",
        help="start the CSV with a UTF-8 byte-order mark (for spreadsheet programs that need it)",
    )


def _add_formula_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--allow-formulas",
        action="store_true",
        help="write text cells that begin with = + - @ as they are (by default they get a "
        "leading ' so spreadsheet programs do not run them as formulas)",
    )


# -- summaries on a database or cluster ---------------------------------------------------


def _add_summary_sql_command(command: argparse.ArgumentParser) -> None:
    command.description = (
        "Print one SQL query that returns the per-group summary table (grouping, level, "
        "outcome, n, mean_log, sd_log, median, n_missing, n_excluded) for the engine that "
        "holds the data; save its result as CSV and run 'foldsift scan --summary FILE.csv'. "
        "The columns compared are chosen as 'foldsift scan' chooses them from DATA. The "
        "query reads every outcome column as numbers: entries below a detection limit "
        "(<0.5, ND), units in cells and decimal commas must be handled before (censored "
        "groups go in as censored fit rows; README, --summary)."
    )
    command.add_argument(
        "data",
        type=Path,
        metavar="DATA",
        help="CSV, TSV or Parquet: the data, a sample of it, or (with --group and --outcome) "
        "a file holding just its header",
    )
    command.add_argument("--engine", choices=SQL_DIALECTS, required=True, help="SQL dialect")
    source = command.add_mutually_exclusive_group()
    source.add_argument(
        "--table", metavar="NAME", help="the table or view on the engine (lab.samples)"
    )
    source.add_argument(
        "--parquet",
        metavar="PATH",
        help="Parquet file, folder or glob the engine reads (duckdb, spark; default: DATA)",
    )
    command.add_argument("--group", action="append", metavar="COL", help="grouping (repeat)")
    command.add_argument("--outcome", action="append", metavar="COL", help="outcome (repeat)")
    command.add_argument(
        "--no-median",
        action="store_true",
        help="leave medians out (an exact median sorts each group's values)",
    )
    command.add_argument("--encoding", metavar="NAME", help="text encoding of DATA")
    command.add_argument("--wide", action="store_true", help="never read DATA as a long table")


def command_summary_sql(args: argparse.Namespace) -> int:
    from foldsift.stats.load import ReadOptions
    from foldsift.stats.summary_sql import query_columns, source_for, summary_query

    columns = query_columns(
        args.data,
        args.group or (),
        args.outcome or (),
        reading=ReadOptions(encoding=args.encoding),
        wide=args.wide,
    )
    source = args.table or source_for(args.parquet or args.data, args.engine)
    query = summary_query(
        source, columns.groupings, columns.outcomes, args.engine, median=not args.no_median
    )
    print(
        f"foldsift: {args.data.name}: {len(columns.groupings)} grouping(s) "
        f"({', '.join(columns.groupings)}), {len(columns.outcomes)} outcome(s); "
        f"{args.engine} query on stdout",
        file=sys.stderr,
    )
    for name, found in columns.not_plain.items():
        print(
            f"foldsift: warning: {name}: holds entries that are not plain numbers ({found}); "
            "the query casts the column to numbers, so handle them on the engine first",
            file=sys.stderr,
        )
    sys.stdout.write(query)
    return 0


def _add_summary_merge_command(command: argparse.ArgumentParser) -> None:
    command.description = (
        "Merge summary tables of separate partitions of one data set (the same grouping, "
        "level and outcome in several files) into the summary of the whole: counts added, "
        "means and SDs of the logs combined exactly. Medians cannot be merged and are left "
        "empty. Text is written as it is (no spreadsheet-formula guard), so that "
        "'foldsift scan --summary' reads the levels unchanged."
    )
    command.add_argument(
        "parts", type=Path, nargs="+", metavar="PART", help="summary table (CSV, TSV, Parquet)"
    )
    command.add_argument("--out", type=Path, metavar="FILE.csv", help="write here, not stdout")
    command.add_argument("--overwrite", action="store_true", help="replace FILE.csv if it exists")


def command_summary_merge(args: argparse.Namespace) -> int:
    from foldsift.stats.summary_sql import merge_summaries, read_summary_parts

    from .export import csv_text, write_export

    out: Path | None = args.out
    if out is not None:
        if any(out.exists() and out.resolve() == part.resolve() for part in args.parts):
            raise InputError(f"{out}: is one of the parts; choose another name for the CSV")
        args.data = args.parts[0]
        _check_out(out, args)
    parts = read_summary_parts(args.parts)
    merged = merge_summaries(parts)
    print(
        f"foldsift: merged {parts.height} rows of {len(args.parts)} file(s) into "
        f"{merged.height} groups (medians left empty: they cannot be merged)",
        file=sys.stderr,
    )
    if out is None:
        sys.stdout.write(csv_text(merged, allow_formulas=True).write_csv())
        return 0
    metadata = {"merged_from": [str(part) for part in args.parts], "medians": "not merged"}

    def write() -> int:
        write_export(
            merged,
            out,
            metadata,
            overwrite=args.overwrite,
            protect=list(args.parts),
            allow_formulas=True,
        )
        return merged.height

    return _guarded_write(args, write)


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "quiet", False):
        QUIET.set()
    else:
        QUIET.clear()
    handlers = {
        "scan": command_scan,
        "review": command_review,
        "export": command_export,
        "summary-sql": command_summary_sql,
        "summary-merge": command_summary_merge,
    }
    try:
        return handlers[args.command](args)
    except InputError as error:
        return _fail(str(error))
    except ValueError as error:
        return _fail(str(error))
    except BrokenPipeError:
        return 0
    except KeyboardInterrupt:
        return 130


if __name__ == "__main__":
    sys.exit(main())
