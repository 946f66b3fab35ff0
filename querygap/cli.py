"""The command line: thin typer commands that call one library function each and print.

Errors the user can fix (:class:`querygap.errors.QuerygapError`) are printed as one line,
"Error: ...", with exit status 1; anything else is a bug and keeps its traceback.
"""

from __future__ import annotations

import functools
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Annotated, Any, TypeVar

import typer
from rich.console import Console

from querygap import __version__
from querygap import console as out
from querygap.analyzer import AnalyzerSettings
from querygap.errors import ConfigError, QuerygapError
from querygap.indexing import IndexSettings
from querygap.logload import LoadOptions, load_log
from querygap.pageload import ContentOptions, load_content
from querygap.redaction import RedactionRules
from querygap.review import ReviewResult, failing_queries, latest_window, run_review
from querygap.settings import ReviewSettings
from querygap.weighting import Weighting
from querygap.windows import Window, date_range, iso_week
from querygap.workspace import DEFAULT_WORKSPACE, connect

app = typer.Typer(
    name="querygap",
    help="Find the searches your site fails, propose fixes, and check that the fixes worked.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
stdout = Console(
    highlight=False, soft_wrap=False, width=max(shutil.get_terminal_size((120, 40)).columns, 100)
)
stderr = Console(stderr=True, highlight=False)

F = TypeVar("F", bound=Callable[..., Any])

DbOpt = Annotated[Path, typer.Option("--db", help="Workspace file (DuckDB); created if missing.")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print one JSON document instead of tables.")]
TzOpt = Annotated[str, typer.Option("--tz", help="Time zone for naive timestamps and for dates.")]


def reports_errors(func: F) -> F:
    """Turn QuerygapError into one 'Error: ...' line and exit status 1."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except QuerygapError as exc:
            stderr.print(f"Error: {exc}", markup=False, highlight=False, soft_wrap=True)
            raise typer.Exit(1) from None

    return wrapper  # type: ignore[return-value]


def parse_pairs(values: list[str], option: str) -> dict[str, str]:
    pairs = {}
    for item in values:
        key, sep, value = item.partition("=")
        if not sep or not key.strip() or not value.strip():
            raise ConfigError(f"{option} takes NAME=VALUE; got {item!r}")
        pairs[key.strip()] = value.strip()
    return pairs


@app.command("add-log")
@reports_errors
def add_log(
    files: Annotated[
        list[Path], typer.Argument(help="Log files: CSV, TSV, JSON Lines or Parquet, gzip allowed.")
    ],
    db: DbOpt = DEFAULT_WORKSPACE,
    fmt: Annotated[
        str | None,
        typer.Option("--format", help="csv, tsv, jsonl or parquet (default: from the name)."),
    ] = None,
    encoding: Annotated[
        str | None, typer.Option(help="utf-8, utf-16 or latin-1 (default: UTF-8, or the BOM's).")
    ] = None,
    delimiter: Annotated[
        str | None,
        typer.Option(help="Field delimiter of CSV files (default: guessed from the header)."),
    ] = None,
    column: Annotated[
        list[str],
        typer.Option(
            "--column", help="FIELD=COLUMN for query, timestamp, session, user, results or clicks."
        ),
    ] = [],  # noqa: B006
    tz: TzOpt = "UTC",
    time_format: Annotated[
        str, typer.Option(help="strptime format of the timestamps, e.g. '%d/%m/%Y %H:%M'.")
    ] = "",
    redact_pattern: Annotated[
        list[str],
        typer.Option("--redact-pattern", help="LABEL=REGEX: more text to redact, as [LABEL]."),
    ] = [],  # noqa: B006
    keep_personal_data: Annotated[
        bool,
        typer.Option("--keep-personal-data", help="Store query text unredacted (not advised)."),
    ] = False,
    as_json: JsonOpt = False,
) -> None:
    """Load query logs into the workspace (personal data is redacted first).

    Example: querygap add-log searches-2026-w46.csv --tz Europe/Vienna
    """
    rules = RedactionRules(
        enabled=not keep_personal_data,
        extra_patterns=tuple(parse_pairs(redact_pattern, "--redact-pattern").items()),
    )
    if keep_personal_data:
        stderr.print(
            "Warning: --keep-personal-data stores e-mail addresses, phone and card numbers "
            "as typed. Check that your data-protection basis allows it.",
            markup=False,
        )
    options = LoadOptions(
        fmt=fmt,
        encoding=encoding,
        delimiter=delimiter,
        columns=parse_pairs(column, "--column"),
        time_zone=tz,
        time_format=time_format,
        redaction=rules,
    )
    conn = connect(db)
    results = []
    for path in files:
        results.append(load_log(conn, path, options))
    if as_json:
        out.emit_json(stdout, out.load_payload(results))
        return
    stdout.print(out.load_table(results))
    for r in results:
        stdout.print(r.reconciliation(), markup=False, soft_wrap=True)
        if r.ignored:
            stdout.print(
                f"{r.path}: columns not used (not stored): {', '.join(r.ignored)}",
                markup=False,
                soft_wrap=True,
            )
    if any(r.rejected for r in results):
        stdout.print(
            "Rejected rows are kept with their reasons: SELECT * FROM rejects", markup=False
        )


@app.command("add-pages")
@reports_errors
def add_pages(
    path: Annotated[
        Path,
        typer.Argument(
            help="A folder of .html/.md/.txt pages, or a CSV/JSONL/Parquet export with id, title, body, url."
        ),
    ],
    db: DbOpt = DEFAULT_WORKSPACE,
    source: Annotated[
        str | None,
        typer.Option(help="Name of this content source (default: the folder or file name)."),
    ] = None,
    base_url: Annotated[str, typer.Option(help="Prefix for page URLs made from file paths.")] = "",
    as_json: JsonOpt = False,
) -> None:
    """Load (or reload) the site's content pages.

    Example: querygap add-pages ./site --base-url https://help.example.org/
    """
    conn = connect(db)
    result = load_content(conn, path, ContentOptions(source=source, base_url=base_url))
    if as_json:
        out.emit_json(stdout, out.content_payload(result))
    else:
        stdout.print(result.summary(), markup=False)


def pick_window(conn: Any, week: str | None, start: str | None, end: str | None, tz: str) -> Window:
    if week and (start or end):
        raise ConfigError("give either --week or --from/--to, not both")
    if week:
        return iso_week(week, tz)
    if start or end:
        if not (start and end):
            raise ConfigError("--from and --to go together")
        return date_range(start, end, tz)
    return latest_window(conn, tz)


def print_review(result: ReviewResult, rows: list[dict[str, Any]], out_dir: Path) -> None:
    stdout.print(out.review_table(result))
    for line in out.engine_lines(result):
        stdout.print(line, markup=False)
    stdout.print(out.bot_line(result), markup=False)
    if rows:
        stdout.print(out.failing_table(rows))
    if result.clusters:
        stdout.print(out.cluster_table(result.clusters))
    if result.fixes:
        stdout.print(out.fixes_table(result.fixes))
    if result.checks:
        stdout.print(out.checks_table(result.checks))
    if result.awaiting:
        stdout.print(out.awaiting_table(result.awaiting))
    files = {
        "report (open this)": result.report_html,
        "failing queries": result.failing_csv,
        "clusters": result.clusters_csv,
    }
    files |= {name.replace("_", " "): path for name, path in result.proposal_files.items()}
    stdout.print(out.files_table(files))
    took = ", ".join(f"{k} {v:.1f}s" for k, v in result.timings.items())
    stdout.print(
        f"Index {result.index_id} ({'reused' if result.index_reused else 'built'}); "
        f"{result.scored_now:,} queries scored now; {took}",
        markup=False,
    )


@app.command("review")
@reports_errors
def review(
    db: DbOpt = DEFAULT_WORKSPACE,
    week: Annotated[
        str | None,
        typer.Option(help="ISO week to review, e.g. 2026-W46 (default: the newest in the log)."),
    ] = None,
    start: Annotated[
        str | None, typer.Option("--from", help="First day to review, YYYY-MM-DD.")
    ] = None,
    end: Annotated[str | None, typer.Option("--to", help="Last day to review, YYYY-MM-DD.")] = None,
    tz: TzOpt = "UTC",
    out_dir: Annotated[Path, typer.Option("--out", help="Folder for the review's files.")] = Path(
        "reports"
    ),
    min_score: Annotated[
        float, typer.Option(help="A best-page cosine below this makes a query low.")
    ] = ReviewSettings.min_score,
    min_coverage: Annotated[
        float, typer.Option(help="A best-page coverage below this makes a query low.")
    ] = ReviewSettings.min_coverage,
    stem: Annotated[bool, typer.Option(help="Stem terms (Snowball English).")] = False,
    stop_words: Annotated[bool, typer.Option(help="Drop English stop words.")] = False,
    tf: Annotated[str, typer.Option(help="share (count/length) or log (1 + ln count).")] = "share",
    idf: Annotated[
        str, typer.Option(help="plain ln(N/df) or smooth ln((1+N)/(1+df)) + 1.")
    ] = "plain",
    model: Annotated[
        str, typer.Option(help="tfidf or bm25 (page weights; still a cosine).")
    ] = "tfidf",
    title_weight: Annotated[float, typer.Option(help="How many times a title term counts.")] = 2.0,
    heading_weight: Annotated[float, typer.Option(help="Extra count for a heading term.")] = 1.0,
    as_json: JsonOpt = False,
) -> None:
    """Score every unique query of a window against the content and flag the failing ones.

    Example: querygap review --week 2026-W46
    """
    settings = ReviewSettings(
        min_score=min_score,
        min_coverage=min_coverage,
        index=IndexSettings(
            AnalyzerSettings(stem=stem, stop_words=stop_words),
            Weighting(tf=tf, idf=idf, model=model),
            title_weight,
            heading_weight,
        ),
    )
    conn = connect(db)
    window = pick_window(conn, week, start, end, tz)
    folder = out_dir / window.review_id
    from querygap.stage_progress import StageProgress

    with StageProgress(stderr) as stages:
        result = run_review(conn, window, settings, folder, progress=stages)
    rows = failing_queries(
        conn, result.review_id, result.index_id, out.FAILING_IN_TERMINAL
    ).to_dict("records")
    if as_json:
        out.emit_json(stdout, out.review_payload(result))
    else:
        print_review(result, rows, folder)


@app.command("demo")
@reports_errors
def demo(
    db: Annotated[
        Path, typer.Option("--db", help="Workspace file for the demo (recreated).")
    ] = Path("querygap-demo.duckdb"),
    out_dir: Annotated[Path, typer.Option("--out", help="Folder for the review's files.")] = Path(
        "reports"
    ),
    as_json: JsonOpt = False,
) -> None:
    """Run the whole weekly review on the bundled demo data (a fictional water utility)."""
    from querygap.demo import run_demo

    result, rows = run_demo(
        db,
        out_dir,
        say=lambda msg: None if as_json else stdout.print(msg, markup=False, soft_wrap=True),
    )
    if as_json:
        out.emit_json(stdout, out.review_payload(result))
    else:
        print_review(result, rows, out_dir / result.review_id)


@app.command("decide")
@reports_errors
def decide(
    db: DbOpt = DEFAULT_WORKSPACE,
    kind: Annotated[
        str | None, typer.Option(help="spelling, synonym, variant or content_gap.")
    ] = None,
    term: Annotated[str | None, typer.Option(help="The term, as in proposals.csv.")] = None,
    suggestion: Annotated[str, typer.Option(help="The suggestion ('' for a content gap).")] = "",
    status: Annotated[str | None, typer.Option(help="accepted, rejected or parked.")] = None,
    direction: Annotated[str, typer.Option(help="one-way or both-ways.")] = "one-way",
    note: Annotated[str, typer.Option(help="Why (kept with the decision).")] = "",
    rules: Annotated[
        Path | None,
        typer.Option(
            "--rules", help="An edited rules.csv: store every row whose status is not 'proposed'."
        ),
    ] = None,
) -> None:
    """Accept, reject or park a proposal (rejected ones are not proposed again).

    Example: querygap decide --kind spelling --term recieve --suggestion receive --status accepted
    """
    from querygap.decisions import Decision, check_decision, read_rules, store_decisions

    if rules is not None and (kind or term or status):
        raise ConfigError("give either --rules or --kind/--term/--status, not both")
    if rules is not None:
        decisions = read_rules(rules)
    elif kind and term and status:
        decisions = [check_decision(Decision(kind, term, suggestion, status, direction, note))]
    else:
        raise ConfigError("give --kind, --term and --status (and --suggestion), or --rules FILE")
    stored = store_decisions(connect(db), decisions)
    stdout.print(f"{stored} decision{'s' if stored != 1 else ''} stored.", markup=False)


@app.command("version")
def version() -> None:
    """Print querygap's version."""
    stdout.print(f"querygap {__version__}")


# --- check: simulate a rules file, observe a change ---------------------------------------------
# Exit status: 0 the check ran and found nothing to act on; 1 error; 3 (EXIT_PROBLEM) the
# simulation made an ok query worse, or the observation found a rule not fixed.


@app.command("simulate")
@reports_errors
def simulate_command(
    rules_file: Annotated[Path, typer.Argument(help="The rules file (kind,term,replacement,...).")],
    db: DbOpt = DEFAULT_WORKSPACE,
    week: Annotated[
        str | None, typer.Option(help="The review to simulate on, e.g. 2026-W46 (default: newest).")
    ] = None,
    start: Annotated[str | None, typer.Option("--from", help="Review window's first day.")] = None,
    end: Annotated[str | None, typer.Option("--to", help="Review window's last day.")] = None,
    tz: TzOpt = "UTC",
    out_dir: Annotated[Path, typer.Option("--out", help="Folder for the review's files.")] = Path(
        "reports"
    ),
    not_rejected: Annotated[
        bool,
        typer.Option(
            "--not-rejected", help="Apply every rule not rejected, not only accepted ones."
        ),
    ] = False,
    score_margin: Annotated[
        float, typer.Option(help="An ok query whose best cosine falls by more than this regressed.")
    ] = 0.1,
    as_json: JsonOpt = False,
) -> None:
    """Apply a rules file to a review's queries, re-score them and report fixed and regressed.

    Exit status 3 when a query that was ok gets worse. Example: querygap simulate rules.csv --week 2026-W46
    """
    from querygap import checks_console as checks
    from querygap.simulate import simulate

    conn = connect(db)
    window = pick_window(conn, week, start, end, tz)
    result = simulate(
        conn, rules_file, window.review_id, out_dir / window.review_id, not_rejected, score_margin
    )
    if as_json:
        out.emit_json(stdout, checks.simulation_payload(result))
    else:
        stdout.print(checks.simulation_table(result))
        for line in checks.simulation_lines(result):
            stdout.print(line, markup=False)
    if result.regressions:
        raise typer.Exit(checks.EXIT_PROBLEM)


@app.command("observe")
@reports_errors
def observe_command(
    rules_file: Annotated[
        Path | None, typer.Argument(help="The rules file (default: the accepted decisions).")
    ] = None,
    change_date: Annotated[
        str, typer.Option("--change-date", help="Day the change went live, YYYY-MM-DD.")
    ] = "",
    before_week: Annotated[
        str | None, typer.Option(help="ISO week before the change (default: the days before).")
    ] = None,
    after_week: Annotated[
        str | None, typer.Option(help="ISO week after the change (default: the days after).")
    ] = None,
    days: Annotated[int, typer.Option(help="Days on each side of the change.")] = 7,
    db: DbOpt = DEFAULT_WORKSPACE,
    tz: TzOpt = "UTC",
    not_rejected: Annotated[
        bool,
        typer.Option(
            "--not-rejected", help="Observe every rule not rejected, not only accepted ones."
        ),
    ] = False,
    alpha: Annotated[float, typer.Option(help="Significance level of the test.")] = 0.05,
    min_searches: Annotated[int, typer.Option(help="Fewest searches per side for a verdict.")] = 30,
    exact: Annotated[
        bool, typer.Option(help="Use Fisher's exact test where the z-test is not trusted.")
    ] = True,
    as_json: JsonOpt = False,
) -> None:
    """Compare searches before and after a change, per rule: fixed, not fixed, or not enough data.

    Exit status 3 when a rule is not fixed. Example: querygap observe rules.csv --change-date 2026-11-16
    """
    from querygap import checks_console as checks
    from querygap.observe import change_instant, observation_windows, observe

    if not change_date:
        raise ConfigError("--change-date is required, e.g. --change-date 2026-11-16")
    change_at = change_instant(change_date, tz)
    before, after = observation_windows(change_at, before_week, after_week, days, tz)
    conn = connect(db)
    result = observe(
        conn, rules_file, change_at, before, after, not_rejected, alpha, min_searches, exact
    )
    if as_json:
        out.emit_json(stdout, checks.observation_payload(result))
    else:
        stdout.print(checks.observation_table(result))
        for line in checks.observation_lines(result):
            stdout.print(line, markup=False)
    if result.not_fixed:
        raise typer.Exit(checks.EXIT_PROBLEM)


def main() -> None:  # pragma: no cover
    app(prog_name="querygap")


if __name__ == "__main__":  # pragma: no cover
    main()
