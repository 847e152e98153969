"""The ``roletrail`` command: a thin shell over :class:`tracker.api.Study`.

Each command parses options, calls the API verb of the same name and prints.
Errors a user can cause print one line and exit with status 2; the study is
left unchanged (every write is one transaction).
"""

from __future__ import annotations

import functools
import os
import sys

import click
import pandas as pd

from tracker import __version__
from tracker.errors import RoletrailError
from tracker.output import FORMATS, render, write

__all__ = ["main"]


class _Group(click.Group):
    """Turns user errors (and surprises) into one line on standard error."""

    def invoke(self, ctx):
        try:
            return super().invoke(ctx)
        except RoletrailError as exc:
            _fail(str(exc), exc.exit_code)
        except (click.exceptions.Exit, click.exceptions.Abort, click.ClickException, SystemExit):
            raise
        except KeyboardInterrupt:
            _fail("interrupted; the study is unchanged", 130)
        except BrokenPipeError:
            _closed_pipe()
        except Exception as exc:  # noqa: BLE001 - last line of defence for the user
            if os.environ.get("ROLETRAIL_DEBUG"):
                raise
            message = _known_database_problem(exc)
            if message:
                _fail(message, 2)
            _fail(
                f"internal error ({type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}); "
                "the study is unchanged. Please report it; set ROLETRAIL_DEBUG=1 to see the details",
                70,
            )


def _known_database_problem(exc: Exception) -> str | None:
    from sqlalchemy.exc import OperationalError

    if isinstance(exc, OperationalError):
        text = str(exc.orig) if exc.orig is not None else str(exc)
        if "locked" in text or "busy" in text:
            return "the study is busy: another roletrail process is writing to it; wait for it to finish and try again"
        if "disk" in text or "full" in text:
            return f"the database could not be written ({text}); free some disk space and try again"
        return f"the database could not be used ({text}); check --db and that the file is a roletrail study"
    return None


def _closed_pipe() -> None:
    """The reader of our output went away (``roletrail moves | head``): stop quietly, as command-line tools do.

    Standard output is pointed at the null device so Python's final flush does
    not complain; the exit status is 128 + SIGPIPE, what a shell reports for
    a tool stopped by a closed pipe.  Whatever was saved before stays saved.
    """
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError, AttributeError):
        pass
    sys.exit(141)


def _fail(message: str, code: int) -> None:
    click.echo(f"roletrail: error: {message}", err=True)
    sys.exit(code)


def _study(ctx: click.Context, *, create: bool = False):
    from tracker.api import Study

    study = Study(ctx.obj["db"], create=create)
    ctx.call_on_close(study.close)
    return study


def listing(func):
    """The shared ``--format`` and ``-o`` options of every listing command."""

    @click.option("--format", "fmt", type=click.Choice(FORMATS), default="table", show_default=True,
                  help="How to print: table to read on screen; csv or json for spreadsheets and other programs.")
    @click.option("-o", "--output", type=click.Path(dir_okay=False, writable=True), default=None,
                  help="Write to this file instead of the screen (standard output).")
    @_raw_option
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        return func(*args, **kwargs)

    return wrapper


def _raw_option(func):
    """``--raw``: CSV cells exactly as stored (by default formula-like text gets a leading quote)."""

    def remember(ctx, _param, value):
        ctx.meta["roletrail.raw"] = bool(value)
        return value

    return click.option("--raw", is_flag=True, expose_value=False, callback=remember,
                        help="CSV: write cells as they are; by default text starting with = + - @ gets a "
                             "leading ' so spreadsheets do not run it as a formula.")(func)


def _emit(frame: pd.DataFrame, fmt: str, output: str | None, title: str | None = None) -> None:
    ctx = click.get_current_context(silent=True)
    raw = bool(ctx and ctx.meta.get("roletrail.raw"))
    write(render(frame, fmt, title=title, raw=raw), output)
    if output and output != "-":
        click.echo(f"wrote {len(frame)} rows to {output}", err=True)


def computing(func=None, *, parallel: bool = True):
    """The shared options of every command that computes at length, and its progress bars.

    ``--workers N`` (default: every core) and ``--scheduler ADDRESS`` (a Dask
    cluster; env ROLETRAIL_SCHEDULER) say where the command's independent
    computations run (:func:`tracker.execution.configured`); ``--quiet``
    turns off the progress bars, which are drawn on standard error only when
    it is a terminal.  ``parallel=False`` gives only ``--quiet``.
    """
    if func is None:
        return functools.partial(computing, parallel=parallel)

    @functools.wraps(func)
    def wrapper(*args, workers=None, scheduler=None, quiet=False, **kwargs):
        from tracker.execution import configured, connect
        from tracker.progress import Bars

        with Bars(quiet) as bars, configured(workers, scheduler, bars) as execution:
            if execution.scheduler:
                connect(execution.scheduler)  # a wrong address fails now, in one line, before any work
            return func(*args, **kwargs)

    wrapper = click.option("--quiet", is_flag=True, help="Do not draw progress bars.")(wrapper)
    if parallel:
        wrapper = click.option("--scheduler", envvar="ROLETRAIL_SCHEDULER", default=None, metavar="ADDRESS",
                               help="Run the computations on this Dask cluster, e.g. tcp://host:8786 "
                                    "[env ROLETRAIL_SCHEDULER].")(wrapper)
        wrapper = click.option("--workers", type=click.IntRange(min=1), default=None, metavar="N",
                               help="Most processes to compute with on this machine [default: every core]; "
                                    "batches too small to gain from more run in this process. "
                                    "Results never depend on it.")(wrapper)
    return wrapper


def _progress_bar(label: str):
    """A progress callback (bytes done, bytes total) from the command's bars, and a context for it."""
    import contextlib

    from tracker.execution import step_progress

    update = step_progress(label, None, unit="bytes")
    return contextlib.nullcontext(), (update or (lambda done, total: None))


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--db", envvar="ROLETRAIL_DB", default=None, metavar="PATH|URL",
              help="Where the study is kept: a file (SQLite) or a database address (SQLAlchemy URL, e.g. "
                   "postgresql+psycopg://...). Also read from ROLETRAIL_DB; default roletrail.db in this folder.")
@click.version_option(__version__, prog_name="roletrail")
@click.pass_context
def main(ctx: click.Context, db: str | None) -> None:
    """Track how actors move between network positions over time."""
    ctx.ensure_object(dict)
    ctx.obj["db"] = db


@main.command("import")
@click.argument("file")
@click.option("--source", required=True, help="Column naming the actor the event comes from (the sender).")
@click.option("--target", required=True, help="Column naming the actor the event goes to (the receiver).")
@click.option("--date", "date_col",
              help="Column with the date of each event (ISO dates such as 2019-03-31, or bare years).")
@click.option("--period", default="year", show_default=True,
              help="How to group dates into periods: year, quarter, month, or N-year windows such as 2y.")
@click.option("--period-origin", default=0, type=int,
              help="With N-year windows: the first year of any one window, e.g. 2001 for 2001-2002, 2003-2004 ... "
                   "(default: windows start at multiples of N).")
@click.option("--period-column",
              help="Column that already names each row's period (e.g. a survey wave), instead of --date.")
@click.option("--relation", "relation_col",
              help="Column naming the kind of tie of each row, e.g. aid or dispute (the relation).")
@click.option("--relation-name",
              help="One kind of tie (relation) for every row, when the file has no such column (default 'tie').")
@click.option("--weight", help="Column with how much each event counts (its weight; default: every event counts 1).")
@click.option("--undirected", is_flag=True,
              help="Ties have no direction: A with B is the same as B with A (an undirected relation).")
@click.option("--date-format", multiple=True,
              help="How the dates are written when they are not ISO dates: a pattern such as %d/%m/%Y for 31/03/2019 "
                   "(strftime format); repeat it to accept several, tried in turn ('iso' = ISO dates and bare years).")
@click.option("--delimiter",
              help="Character that separates the columns of a CSV file (the delimiter; detected when left out); 'tab' "
                   "for tabs.")
@click.option("--replace", is_flag=True,
              help="Replace an earlier import of the same content (or of the same file name) instead of refusing it.")
@click.option("--errors", "errors", nargs=2, type=(click.Choice(["report"]), click.Path(dir_okay=False)), default=None,
              metavar="report FILE",
              help="Write every bad row (editor line, column, value, problem, fix) to FILE and import the others "
                   "(default: stop at the first bad row and import nothing).")
@click.option("--duplicates", type=click.Choice(["keep", "drop"]), default="keep", show_default=True,
              help="Rows that repeat another row, or an event already in the study: keep them (and count them) or "
                   "drop them.")
@click.option("--memory-limit", default="1GB", show_default=True,
              help="Memory for summing a folder of files (DuckDB; beyond it work spills to disk).")
@computing(parallel=False)
@click.pass_context
def import_cmd(ctx, file, source, target, date_col, period, period_origin, period_column, relation_col,
               relation_name, weight, undirected, date_format, delimiter, replace, errors, duplicates, memory_limit):
    """Import events from FILE: one row per dated interaction between two actors (dyadic events).

    FILE is CSV, Parquet or Excel (.xlsx), or a folder or glob of CSV/Parquet files.
    """
    study = _study(ctx, create=True)
    progress, update = _progress_bar(f"importing {os.path.basename(file)}")
    with progress:
        report = study.import_events(
            file, source=source, target=target, date=date_col, period=period, period_origin=period_origin,
            period_column=period_column, relation=relation_col, relation_name=relation_name, weight=weight,
            undirected=undirected, date_format=date_format or None, delimiter=delimiter, replace=replace, progress=update,
            errors_file=errors[1] if errors else None, drop_duplicates=duplicates == "drop", memory_limit=memory_limit,
        )
    for line in _import_lines(report):
        click.echo(line)
    for line in _import_warnings(report, relation_col, relation_name):
        click.echo(line, err=True)


def _import_lines(report) -> list[str]:
    replaced = f", replacing batch {', '.join(map(str, report['replaced']))}" if report["replaced"] else ""
    files = f" ({report['files']} files, summed per pair and period)" if report.get("files") else ""
    lines = [
        f"imported {report['file']}{files} as batch {report['batch']}{replaced}: {report['rows_loaded']} events "
        f"of {report['rows_read']} rows, {report['self_ties_dropped']} self-ties dropped, "
        f"{report['new_actors']} new actors, {report['periods']} periods updated"
    ]
    if report.get("rows_rejected") or report.get("errors_file"):
        lines.append(f"{report['rows_rejected']} bad rows skipped, listed in {report['errors_file']}")
    return lines


def _import_warnings(report, relation_col, relation_name) -> list[str]:
    lines = []
    found = report.get("duplicates_in_file", 0) + report.get("duplicates_in_study", 0)
    if found:
        done = "dropped" if report.get("duplicates_dropped") else "kept (--duplicates drop leaves them out)"
        lines.append(
            f"warning: {report['duplicates_in_file']} rows repeat an earlier row of the file and "
            f"{report['duplicates_in_study']} repeat an event already in the study (same actors, relation, date and weight); {done}"
        )
    if report.get("new_relations") and report.get("relations_before"):
        new = ", ".join(repr(r) for r in report["new_relations"])
        had = ", ".join(repr(r) for r in report["relations_before"])
        hint = (" (the default when neither --relation nor --relation-name is given)"
                if relation_col is None and relation_name is None else "")
        lines.append(
            f"warning: this import created the relation {new}{hint}; the study already has {had}. "
            "If that was not meant, re-import with --replace and --relation-name NAME"
        )
    return lines


@main.command("import-actors")
@click.argument("file", type=click.Path(dir_okay=False))
@click.option("--actor", default="actor", show_default=True, help="Column with the actors' names.")
@click.option("--first",
              help="Column with the first period (year or date) in which the actor exists; before it the actor is "
                   "absent, not isolated.")
@click.option("--last", help="Column with the last period (year or date) in which the actor exists.")
@click.option("--delimiter",
              help="Character that separates the columns of a CSV file (the delimiter; detected when left out).")
@click.option("--replace", is_flag=True, help="Replace the earlier import of this list of actors.")
@click.pass_context
def import_actors_cmd(ctx, file, actor, first, last, delimiter, replace):
    """Import a list of actors (a roster) from FILE: who exists in which periods.

    Other columns are kept as the actors' attributes.
    """
    study = _study(ctx, create=True)
    report = study.import_actors(file, actor=actor, first=first, last=last, delimiter=delimiter, replace=replace)
    click.echo(f"imported roster {report['file']} as batch {report['batch']}: {report['rows_loaded']} actors, {report['new_actors']} new")


@main.command()
@listing
@click.pass_context
def summary(ctx, fmt, output):
    """Per period and kind of tie: actors, ties, density, reciprocity, isolates.

    Density is the share of possible ties present, reciprocity the share of ties returned, isolates the
    actors without ties.
    """
    from tracker.measures import SPARSE_DENSITY

    frame = _study(ctx).summary()
    _emit(frame, fmt, output, title="Periods and relations")
    if fmt == "table" and output is None and len(frame) and frame["sparse"].any():
        sparse = frame.loc[frame["sparse"], "period"].nunique()
        click.echo(
            f"note: {sparse} of {frame['period'].nunique()} periods have density below {SPARSE_DENSITY:g} in some relation; "
            "the zero-block criterion (--criterion zero-block) suits such sparse data."
        )


@main.command()
@listing
@click.option("--similar", is_flag=True, help="List likely duplicates (case, punctuation, one-letter misspellings) as suggested alias commands.")
@click.option("--max-edits", default=1, show_default=True, type=click.IntRange(0, 5), help="With --similar: letters that may differ.")
@click.pass_context
def actors(ctx, fmt, output, similar, max_edits):
    """List actors with the periods they exist in (from the roster), their attributes and other names (aliases)."""
    if not similar:
        _emit(_study(ctx).actors(), fmt, output, title="Actors")
        return
    pairs = _study(ctx).similar_actors(max_edits=max_edits)
    _emit(pairs, fmt, output, title="Likely duplicate actors")
    if fmt == "table" and output is None:
        click.echo(f"{len(pairs)} likely duplicates; run the alias commands you agree with (each merges two actors)")


@main.command()
@listing
@click.pass_context
def batches(ctx, fmt, output):
    """List imported files (batches): rows read and loaded, when, and each file's content hash (SHA-256)."""
    _emit(_study(ctx).batches(), fmt, output, title="Imports")


@main.command()
@click.option("--repair", is_flag=True,
              help="First rebuild every tie from the raw events (safe: ties are always derived from the events).")
@click.option("--all-fits", is_flag=True, help="Check every stored fitted period (default: the latest 50).")
@click.pass_context
def check(ctx, repair, all_fits):
    """Check the study for damage or contradictions; print each problem with its fix.

    Exit status 0 = no problem, 1 = problems.
    """
    problems = _study(ctx).check(repair=repair, all_fits=all_fits)
    if repair:
        click.echo("rebuilt every tie from the raw events")
    if not problems:
        click.echo("study ok: integrity, references, ties and fits are consistent")
        return
    for problem in problems:
        click.echo(str(problem))
    click.echo(f"{len(problems)} problem(s) found")
    sys.exit(1)


def _keep_options(func):
    """--refit / --force of the commands that change the data under stored fits."""
    func = click.option("--force", is_flag=True, help="Go ahead and drop the fits, alignments and track names "
                        "the change makes out of date.")(func)
    return click.option("--refit", is_flag=True, help="Fit every affected fit again with its stored settings, "
                        "align it again and carry its track names over.")(func)


def _echo_refits(refits) -> None:
    for entry in refits:
        if entry["error"]:
            click.echo(f"fit {entry['old']} could not be fitted again ({entry['error']}); it is gone")
            continue
        names = ", ".join(f"{n!r} -> track {t}" for t, n in sorted(entry["names"].items()))
        click.echo(f"fit {entry['old']} fitted again as fit {entry['new']}" + (f"; names carried: {names}" if names else ""))
        if entry["lost"]:
            click.echo(f"  names with no matching track: {', '.join(map(repr, entry['lost']))}")


@main.command()
@click.argument("other_name")
@click.argument("actor")
@_keep_options
@click.pass_context
def alias(ctx, other_name, actor, refit, force):
    """Record OTHER_NAME as another spelling of ACTOR (merging the two if both have events)."""
    result = _study(ctx).alias(other_name, actor, refit=refit, force=force)
    if result["merged"]:
        click.echo(f"merged {other_name!r} into {actor!r}: {result['events_moved']} events moved, ties rebuilt")
    else:
        click.echo(f"{other_name!r} now names {actor!r}")
    _echo_refits(result["refits"])


@main.command()
@click.option("--period", required=True,
              help="New way to group dates into periods: year, quarter, month, or N-year windows such as 2y.")
@click.option("--period-origin", default=0, type=int,
              help="With N-year windows: the first year of any one window (default: windows start at multiples of N).")
@_keep_options
@click.pass_context
def recut(ctx, period, period_origin, refit, force):
    """Group every dated event into new periods (re-cut; no re-import needed)."""
    result = _study(ctx).recut(period, origin=period_origin, refit=refit, force=force)
    click.echo(f"re-cut {result['events']} events into {result['periods']} periods by {result['scheme']}")
    _echo_refits(result["refits"])


def _periods_option(func):
    return click.option("--periods", "periods", multiple=True, metavar="PERIOD",
                        help="Only these periods (repeat the option, or give a comma-separated list).")(func)


def _split(values) -> list[str] | None:
    out = [v.strip() for value in values or () for v in str(value).split(",") if v.strip()]
    return out or None


@main.command()
@click.option("--method", default="dynamic", show_default=True,
              help="How to find positions: dynamic (one statistical model over all periods in which each actor's "
                   "position can change from period to period: a dynamic stochastic blockmodel), or period by period: "
                   "structural (same ties to the same others), concor (repeated correlations), regular (ties to the "
                   "same kinds of others), optimize (fewest inconsistencies) or sbm (stochastic blockmodel).")
@click.option("--positions", default="4", show_default=True,
              help="How many positions to find among the actors with ties in each period, or 'auto' to choose from the "
                   "data (actors without ties get a position of their own).")
@click.option("--criterion", default="zero-block", show_default=True,
              type=click.Choice(["zero-block", "one-block", "density", "max-value", "mean-value", "above-background"]),
              help="When a block (the ties from one position to another) counts as tied in the image: zero-block (any "
                   "tie; "
                   "suits sparse data), one-block (every possible tie), density (a share of at least --alpha), "
                   "max-value (a value reaching --cut), mean-value (a mean at least the overall mean), above-background (clearly "
                   "more ties than the whole network's density: a one-sided binomial test; suits noisy sparse data).")
@click.option("--alpha", type=float,
              help="With --criterion density: the share of possible ties a block needs to count as tied (default: the "
                   "whole network's density).")
@click.option("--cut", type=float,
              help="With --criterion max-value: the value a block's largest tie must reach to count as tied (default: "
                   "the median tie value).")
@click.option("--seed", default=0, show_default=True, type=int,
              help="Starting number of every random step (the seed); the same seed gives the same result.")
@_periods_option
@click.option("--relation", "relations", multiple=True,
              help="Fit only these kinds of tie (relations), together; default all.")
@click.option("--draws", default=39, show_default=True, type=int,
              help="How many random networks to refit when testing each period's fit against chance (null-model "
                   "draws; 0 = no test).")
@click.option("--null", "null_model", default="ties", show_default=True, type=click.Choice(["ties", "degrees"]),
              help="What the random networks of the fit test keep: ties (the number of ties and their values) or "
                   "degrees (every actor's number of ties sent and received).")
@click.option("--k-range", default=None,
              help="With --positions auto: the smallest and largest number of positions tried, as MIN-MAX "
                   "[default: 2-8].")
@click.option("--linkage",
              help="structural, regular: how groups of actors are joined while clustering: average, complete, ward or "
                   "single (hierarchical-clustering linkage).")
@click.option("--measure", type=click.Choice(["euclidean", "correlation"]),
              help="structural: how to compare two actors' ties: euclidean (distance) or correlation.")
@click.option("--restarts", type=int,
              help="optimize, sbm: how many random starting points to try; more is slower and surer (restarts).")
@click.option("--exact", is_flag=True,
              help="regular: put actors together only when their kinds of ties match exactly (the maximal regular "
                   "partition; ties present or absent).")
@click.option("--degree-corrected", is_flag=True,
              help="sbm, dynamic: allow actors of one position to differ in how many ties they have, so very active actors do not"
                   " get a position of their own (degree correction).")
@click.option("--model", "sbm_model", type=click.Choice(["poisson", "bernoulli"]),
              help="sbm, dynamic: poisson for counts of events (default) or bernoulli for ties that are simply present or absent.")
@click.option("--joint", is_flag=True,
              help="Deprecated: use --method dynamic (one model over all periods).")
@click.option("--smooth", "smoothing", default=None,
              help="How strongly to resist changes of position from one period to the next, for the descriptive "
                   "methods (change penalty, added to the method's own objective, in units of its per-actor objective): auto "
                   "(0.5 for structural, concor and optimize; none for the others), off (fit each period alone) or a "
                   "number; higher means fewer, surer moves [default: auto]. The dynamic model (the default method) takes no "
                   "--smooth, not even off: it links periods itself.")
@computing
@click.pass_context
def fit(ctx, method, positions, criterion, alpha, cut, seed, periods, relations, draws, null_model, k_range, linkage,
        measure, restarts, exact, degree_corrected, sbm_model, joint, smoothing):
    """Find the positions in every period (or --periods) and store the result (a fit).

    A position is a group of actors with the same pattern of ties to the others.
    """
    from tracker.errors import UsageError

    k_min = k_max = None
    if k_range is not None:
        try:
            k_min, k_max = (int(x) for x in k_range.split("-"))
        except ValueError:
            raise UsageError(f"--k-range takes MIN-MAX such as 2-8, not {k_range!r}") from None
    try:
        positions = positions if positions == "auto" else int(positions)
    except ValueError:
        raise UsageError(f"--positions takes a whole number or 'auto', not {positions!r}") from None
    options = {k: v for k, v in {"linkage": linkage, "measure": measure, "restarts": restarts}.items() if v is not None}
    if exact:
        options["exact"] = True
    if degree_corrected:
        options["degree_corrected"] = True
    if sbm_model:
        options["model"] = sbm_model
    if joint:
        from tracker.pipeline.fitting import deprecated_joint

        method, options, warning = deprecated_joint(method, {**options, "joint": True})
        click.echo(warning, err=True)
    result = _study(ctx).fit(
        method=method, positions=positions, criterion=criterion, alpha=alpha, cut=cut, seed=seed,
        periods=_split(periods), relations=_split(relations), draws=draws, k_min=k_min, k_max=k_max,
        options=options, smoothing=smoothing, null_model=null_model,
    )
    click.echo(f"fit {result['fit']} ({method}, {criterion}, seed {seed}) is now current")
    for line in result.get("warnings", ()):
        click.echo(f"warning: {line}", err=True)
    for note in result.get("notes", []):
        click.echo(f"note: {note}")
    _emit(result["periods"], "table", None)
    _echo_auto(result.get("auto"))


def _filled(value) -> bool:
    return not (value is None or value == "" or (isinstance(value, float) and pd.isna(value)))


def _echo_auto(table) -> None:
    """The per-K table of --positions auto and the reason for each choice."""
    from tracker.views import auto_reasons

    if table is None or table.empty:
        return
    _emit(table.drop(columns=["rule"]), "table", None, title="Numbers of positions tried (--positions auto)")
    for line in auto_reasons(table):
        click.echo(line)


@main.command()
@listing
@click.pass_context
def fits(ctx, fmt, output):
    """List stored fits with their settings; show, export, align and the other commands use the current one."""
    from tracker.views import fits_table

    frame = fits_table(_study(ctx).fits())
    if fmt == "table":
        frame = frame.drop(columns=["params", "created_at", "version"])
        empty = [c for c in ("k_range", "alpha", "cut", "options") if not frame[c].map(_filled).any()]
        frame = frame.drop(columns=empty)
    _emit(frame, fmt, output, title="Fits")


@main.command("use-fit")
@click.argument("fit_id", type=int)
@click.pass_context
def use_fit(ctx, fit_id):
    """Make stored fit FIT_ID the one the other commands use (the current fit)."""
    _study(ctx).use_fit(fit_id)
    click.echo(f"fit {fit_id} is now current")


@main.command()
@click.argument("period")
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.option("--relation", help="Only this kind of tie (relation).")
@click.option("--width", type=click.IntRange(40, 400), default=None,
              help="Wrap to this many columns (default: the terminal's width, 80 in a pipe).")
@click.pass_context
def show(ctx, period, fit_id, relation, width):
    """Show PERIOD: who is in each position, the image as a grid, and the blocks with ties."""
    from tracker.report.console import render_period

    view = _study(ctx).show(period, fit=fit_id, relation=relation)
    click.echo(render_period(view, width), nl=False)


@main.command()
@listing
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.option("--draws", default=199, show_default=True, type=int,
              help="Random images used to test whether each structure is clearer than chance (more is slower and more "
                   "precise).")
@click.option("--sentences/--no-sentences", default=True,
              help="Also print plain sentences about the changes (table format).")
@computing
@click.pass_context
def structures(ctx, fmt, output, fit_id, draws, sentences):
    """For each period, the textbook structure its image is closest to, and when that changes.

    The structures (ideal images) are cohesive subgroups, core-periphery, centralized, hierarchy and transitive;
    roletrail explain TERM says what each means.
    """
    study = _study(ctx)
    table = study.structures(fit=fit_id, draws=draws)
    _emit(_structures_frame(table), fmt, output, title="Ideal structures")
    if sentences and fmt == "table" and output is None:
        for line in study.structure_sentences(table):
            click.echo(line)


def _structures_frame(table: pd.DataFrame) -> pd.DataFrame:
    return table.drop(columns=["parts"], errors="ignore")


@main.command()
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.option("--overlap-weight", default=0.5, show_default=True, type=float,
              help="When linking positions across periods, how much shared members count (1) against a similar role "
                   "toward the other positions (0) (overlap weight).")
@click.option("--link-threshold", default=0.2, show_default=True, type=float,
              help="How similar (0-1) a position must be to one of the period before to continue its track; below it a "
                   "new track starts (link threshold).")
@click.option("--split-threshold", default=0.3, show_default=True, type=float,
              help="Share of members (0-1) a new position must share with a track to count as split from it, or a track "
                   "with a position to count as merged into it (split threshold).")
@click.option("--max-gap", default=0, show_default=True, type=int,
              help="How many periods a track may be missing and still continue afterwards.")
@click.option("--draws", default=20, show_default=True, type=int,
              help="Descriptive methods: studies simulated from the fit and refitted the same way, to learn how "
                   "likely each move is to be real (parametric bootstrap; 0 = no confidence). The dynamic model: "
                   "at least this many studies drawn from it (at most 10x), more until 500 simulated candidate changes "
                   "recalibrate its posterior probability (0 = raw posterior).")
@click.option("--seed", type=int,
              help="Starting number of the simulated studies (seed; default: the fit's seed); the same seed gives "
                   "the same confidences.")
@click.option("--rebuild", is_flag=True,
              help="Link every period again from scratch (track numbers and names carried over by best match).")
@click.option("--include-isolates", is_flag=True,
              help="Count going into or out of the no-tie group (actors without ties in a period) as moves.")
@click.option("--names-from", type=int, default=None, metavar="FIT",
              help="Give the tracks the names of another aligned fit's tracks they overlap most.")
@computing
@click.pass_context
def align(ctx, fit_id, overlap_weight, link_threshold, split_threshold, max_gap, draws, seed, rebuild, include_isolates,
          names_from):
    """Link positions across periods into tracks (lasting positions); find who moved and how sure each move is."""
    result = _study(ctx).align(
        fit=fit_id, weight_overlap=overlap_weight, link_threshold=link_threshold, split_threshold=split_threshold,
        max_gap=max_gap, draws=draws, seed=seed, rebuild=rebuild, include_isolates=include_isolates,
        names_from=names_from,
    )
    for track, name in sorted(result.get("names_carried", {}).items()):
        click.echo(f"track {track} takes the name {name!r} from fit {names_from}")
    moves = result["moves"]
    low = int((moves["confidence"] < 0.5).sum()) if len(moves) else 0
    click.echo(
        f"fit {result['fit']}: {result['periods']} periods aligned ({result['new_periods']} new), "
        f"{int((result['tracks']['track'] > 0).sum())} tracks, {len(moves)} moves"
        + (f" ({low} with confidence below 0.5)" if draws and len(moves) else "")
    )
    left_out = int(result.get("uncertain_changes", 0))
    if left_out:
        click.echo(f"{left_out} candidate changes with probability below 0.5 not reported as moves "
                   "(roletrail export uncertain-changes)")
    _emit(result["tracks"], "table", None, title="Tracks")


@main.command()
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.option("--studies", default=20, show_default=True, type=int,
              help="Studies simulated from the fit, refitted with its own settings.")
@click.option("--seed", type=int, help="Seed of the simulated studies (default: the fit's seed).")
@computing
@click.pass_context
def calibration(ctx, fit_id, studies, seed):
    """Check that move confidence is a probability: simulate studies from the fit, refit, compare."""
    result = _study(ctx).calibration(fit=fit_id, studies=studies, seed=seed)
    table = pd.DataFrame(result["bins"])
    _emit(table, "table", None, title="Move confidence against the share of moves that are real")
    ece = "n/a" if result["ece"] is None else f"{result['ece']:.3f}"
    floor = "" if result.get("ece_floor_95") is None else \
        f"; up to {result['ece_floor_95']:.3f} would be chance on {result['moves']} moves"
    click.echo(f"fit {result['fit']}: {result['studies']} simulated studies, {result['moves']} moves; "
               f"expected calibration error {ece} (0 = confidence matches how often moves are real{floor})")


@main.command()
@listing
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.pass_context
def tracks(ctx, fmt, output, fit_id):
    """List tracks (positions followed across periods) with their names and life span."""
    _emit(_study(ctx).tracks(fit_id), fmt, output, title="Tracks")


@main.command("name-track")
@click.argument("track", type=int)
@click.argument("name")
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.pass_context
def name_track(ctx, track, name, fit_id):
    """Give TRACK a NAME (kept through re-alignment and updates)."""
    _study(ctx).name_track(track, name, fit=fit_id)
    click.echo(f"track {track} is now named {name!r}")


@main.command()
@listing
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.option("--min-confidence", type=float, default=None,
              help="Only moves at least this sure (confidence 0-1; default: all, with unsure ones flagged).")
@click.pass_context
def moves(ctx, fmt, output, fit_id, min_confidence):
    """Who moved, from which track to which, when, and how sure (confidence)."""
    frame = _study(ctx).moves(fit_id)
    if min_confidence is not None:
        frame = frame[frame["confidence"].fillna(0) >= min_confidence]
    if fmt == "table":
        frame = frame.assign(note=["low confidence" if c < 0.5 else "" for c in frame["confidence"].fillna(1.0)])
    _emit(frame, fmt, output, title="Moves")
    if fmt == "table" and output is None:
        click.echo("confidence: probability that the move is real, learned on studies simulated from the fit; "
                   "roletrail calibration checks it.")
        method = (_study(ctx).fit_info(fit_id).get("params") or {}).get("method", "dynamic")
        if method != "dynamic":
            click.echo(f"caution: {method} is a descriptive method; its move confidence is learned from its own "
                       "moves and was far from calibrated on some planted benchmarks (README: Read results with "
                       "care); the dynamic model's is calibrated.")


@main.command()
@listing
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.pass_context
def transitions(ctx, fmt, output, fit_id):
    """How many actors went from each track to each other, per step between periods and in total (counts and shares)."""
    _emit(_study(ctx).transitions(fit_id), fmt, output, title="Transitions")


@main.command()
@click.argument("fit_a", type=int)
@click.argument("fit_b", type=int)
@listing
@click.option("--part", type=click.Choice(["all", "periods", "actors", "moves"]), default="all", show_default=True,
              help="Which table: agreement per period, actors placed differently, moves found by one fit only "
                   "(csv takes one table).")
@click.pass_context
def compare(ctx, fit_a, fit_b, fmt, output, part):
    """How far two fits agree: per period (adjusted Rand index), who is placed differently, which moves differ."""
    from tracker.errors import UsageError
    from tracker.output import to_json_records

    result = _study(ctx).compare(fit_a, fit_b)
    parts = ["periods", "actors", "moves"] if part == "all" else [part]
    if fmt == "csv" and len(parts) > 1:
        raise UsageError("CSV holds one table: add --part periods, --part actors or --part moves")
    if "moves" in parts and result["moves"] is None:
        if part == "moves":
            raise UsageError(f"fits {fit_a} and {fit_b} are not both aligned; run roletrail align --fit N for each")
        parts.remove("moves")
    if fmt == "json" and len(parts) > 1:
        import json as _json

        payload = {"fit_a": result["fit_a"], "fit_b": result["fit_b"],
                   **{name: to_json_records(result[name]) for name in parts}}
        write(_json.dumps(payload, indent=2, ensure_ascii=False) + "\n", output)
        return
    titles = {"periods": f"Agreement of fit {fit_a} (A) and fit {fit_b} (B) per period",
              "actors": "Actors placed differently (matched_b: the B position that corresponds to position_a)",
              "moves": "Moves found by one fit only"}
    for name in parts:
        _emit(result[name], fmt, output, title=titles[name])
    if fmt == "table" and output is None and "moves" not in parts and part == "all":
        click.echo("moves: not compared; align both fits first (roletrail align --fit N)")


EXPORTS = ("memberships", "blocks", "fit-periods", "positions-auto", "structures", "moves", "transitions", "tracks",
           "mobility", "trajectories", "graphml", "uncertain-changes")


@main.command()
@click.argument("what", type=click.Choice(EXPORTS))
@click.option("--format", "fmt", type=click.Choice(["csv", "json"]), default="csv", show_default=True,
              help="csv for spreadsheets, json for other programs.")
@click.option("-o", "--output", type=click.Path(), default=None,
              help="File to write (default: the screen, standard output); for graphml a folder.")
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@_raw_option
@computing
@click.pass_context
def export(ctx, what, fmt, output, fit_id):
    """Export results of the current fit as a table (graphml: one network file per period into folder -o)."""
    from tracker.errors import UsageError

    if what != "graphml" and output and os.path.isdir(output):
        raise UsageError(f"-o {output} is a folder; give a file name for the {what} export")
    study = _study(ctx)
    if what == "graphml":
        folder = output or "graphml"
        written = study.export_graphml(folder, fit=fit_id)
        click.echo(f"wrote {len(written)} GraphML files to {folder}", err=True)
        return
    frame = _export_frame(study, what, fit_id)
    _emit(frame, fmt, output)


def _export_frame(study, what: str, fit_id):
    if what == "memberships":
        return study.memberships(fit_id, names=True)
    if what == "positions-auto":
        from tracker.views import auto_table

        return auto_table(study.fit_periods(fit_id))
    if what == "blocks":
        return study.blocks(fit_id)
    if what == "structures":
        return _structures_frame(study.structures(fit=fit_id))
    if what in ("moves", "transitions", "tracks", "mobility", "trajectories"):
        return getattr(study, what)(fit_id)
    if what == "uncertain-changes":
        return study.uncertain_changes(fit_id)
    return study.fit_periods(fit_id)


@main.command()
@click.option("-o", "--output", default="roletrail-report.html", show_default=True, type=click.Path(dir_okay=False),
              help="The HTML file to write.")
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.option("--anonymise", is_flag=True,
              help="Replace actor names with codes (A001 ...) everywhere in the report, charts included.")
@click.option("--structure-draws", default=199, show_default=True, type=int,
              help="Random images used to test each period's structure against chance (more is slower and more precise).")
@click.option("--key", type=click.Path(dir_okay=False), default=None,
              help="With --anonymise: also write the code -> actor table (CSV) to this separate file.")
@computing
@click.pass_context
def report(ctx, output, fit_id, anonymise, structure_draws, key):
    """Write the self-contained offline HTML report (one file; no network needed)."""
    path = _study(ctx).report(output, fit=fit_id, anonymise=anonymise, structure_draws=structure_draws, key=key)
    click.echo(f"wrote {path}" + (f" and the key to its codes to {key} (keep it apart from the report)" if key else ""))


@main.command()
@click.argument("name")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="File to write: .png, .svg or .json (a Vega-Lite chart description).")
@click.option("--fit", "fit_id", type=int,
              help="Which stored fit (its number in roletrail fits; default: the current one).")
@click.option("--actor", help="trajectory: the actor shown first.")
@computing
@click.pass_context
def chart(ctx, name, output, fit_id, actor):
    """Write one chart NAME (flow, matrix, trajectory, timeline, measures, block-density, fit, structure)."""
    options = {"actor": actor} if actor else {}
    path = _study(ctx).chart(name, output, fit=fit_id, **options)
    click.echo(f"wrote {path}")


@main.command()
@click.option("--scenario", default=None, help="Which bundled scenario (default: coastal-agencies); --list shows them.")
@click.option("--out", default="roletrail-demo", show_default=True, type=click.Path(file_okay=False),
              help="Folder for the demo study and its report.")
@click.option("--list", "list_only", is_flag=True, help="List the bundled scenarios and stop.")
@click.option("--draws", default=10, show_default=True, type=int,
              help="Studies simulated from the fit to learn how likely each move is to be real (descriptive methods).")
@computing
def demo(scenario, out, list_only, draws):
    """Run a bundled invented scenario end to end: import, fit, align, report."""
    from tracker.demo import DEFAULT_SCENARIO, list_scenarios, run_demo

    if list_only:
        for name, spec in list_scenarios().items():
            click.echo(f"{name}: {spec['title']} - {spec['description']}")
        return
    paths = run_demo(scenario or DEFAULT_SCENARIO, out, draws=draws, say=click.echo)
    click.echo(f"study: {paths['study']}")
    click.echo(f"report: {paths['report']} (open it in any browser; it works offline)")


@main.command("run")
@click.argument("analysis_file", type=click.Path(dir_okay=False))
@click.option("--record", is_flag=True,
              help="Write ANALYSIS_FILE from this study instead of running it: every import with its column "
                   "mapping, alias, fit with all its settings and seed, alignment and track name, plus a results "
                   "file beside it that replicate compares with.")
@click.option("--data", "data_dir", type=click.Path(file_okay=False),
              help="Folder that holds the data files (default: the folder of ANALYSIS_FILE).")
@click.option("--report/--no-report", "with_report", default=True, show_default=True,
              help="Include the report step (with --record: add one; when running: write the report the file asks for).")
@click.option("--title", help="With --record: a title for the analysis, kept in the file.")
@click.pass_context
def run_cmd(ctx, analysis_file, record, data_dir, with_report, title):
    """Replay a whole analysis from ANALYSIS_FILE (TOML) into a new study, or write one with --record."""
    from pathlib import Path

    from tracker import replication

    if record:
        stem = Path(analysis_file).with_suffix("").name
        result = replication.record(_study(ctx), analysis_file, report=f"{stem}-report.html" if with_report else None,
                                    title=title, say=click.echo)
        steps = ", ".join(f"{n} {what}" for what, n in result["steps"].items() if n)
        click.echo(f"wrote {result['analysis']} ({steps}) and the results {result['results']}")
        click.echo(f"check it with: roletrail replicate {result['analysis']}")
        return
    result = replication.run(analysis_file, ctx.obj["db"], data_dir=data_dir, skip_report=not with_report,
                             say=click.echo)
    click.echo(f"replayed {analysis_file} into {result['study']}")


@main.command()
@click.argument("analysis_file", type=click.Path(dir_okay=False))
@click.option("--into", metavar="PATH|URL",
              help="Replay into this new study and keep it (default: a temporary study, removed afterwards).")
@click.option("--against", metavar="PATH|URL",
              help="Compare with the results stored in this study instead of the results file that goes with "
                   "ANALYSIS_FILE (fits are matched by their settings).")
@click.option("--tolerance", type=float, default=0.0, show_default=True,
              help="Largest difference allowed between decimal results such as densities and confidences "
                   "(0 = exactly equal). Labels, counts, positions and tracks must always be equal.")
@click.option("--data", "data_dir", type=click.Path(file_okay=False),
              help="Folder that holds the data files (default: the folder of ANALYSIS_FILE).")
@click.option("--limit", default=10, show_default=True, type=click.IntRange(min=1),
              help="Differences listed per table before the rest are counted.")
@click.option("--report/--no-report", "with_report", default=True, show_default=True,
              help="Also build the report the file asks for (in the temporary study's folder).")
def replicate(analysis_file, into, against, tolerance, data_dir, limit, with_report):
    """Re-run ANALYSIS_FILE from its data and confirm every stored result is identical.

    Exit status 0 = identical, 1 = results differ (each difference listed), 2 = the data
    changed or the file cannot be replayed.
    """
    from tracker import replication

    result = replication.replicate(analysis_file, into=into, against=against, tolerance=tolerance,
                                   data_dir=data_dir, limit=limit, skip_report=not with_report, say=click.echo)

    def line(found: dict) -> str:
        return ", ".join(f"{k} {found.get(k, '?')}" for k in ("roletrail", "python", "numpy", "scipy", "pandas",
                                                               "scikit-learn"))

    click.echo(f"recorded with: {line(result.recorded_versions)}" if result.recorded_versions else
               "recorded with: (versions not stored)")
    click.echo(f"replayed with: {line(result.versions)}")
    if result.version_changes():
        click.echo(f"note: versions changed ({'; '.join(result.version_changes())}); decimals may then differ in "
                   "their last digits (see --tolerance)")
    for seeds in result.analysis.seeds():
        click.echo(f"seeds: {seeds}")
    click.echo(f"data: {len(result.analysis.imports)} files, each with the recorded SHA-256")
    rows = sum(result.compared.values())
    tol = "exact equality of every value" if result.tolerance == 0 else \
        f"decimals within {result.tolerance:g}, labels and counts exact"
    click.echo(f"compared {rows} stored rows in {len(result.compared)} tables with {result.reference} ({tol})")
    if result.identical:
        click.echo("identical: every stored result of the replay equals the recorded one")
        return
    click.echo(f"NOT identical: {len(result.differences)} difference(s)")
    for diff in result.differences:
        click.echo(f"  {diff}")
    sys.exit(1)


@main.command()
@click.argument("term", nargs=-1)
def explain(term):
    """Explain a term in plain words, with its formula and published source; alone, list the terms."""
    import shutil

    from tracker import glossary

    if not term:
        entries = [glossary.GLOSSARY[t] for t in glossary.terms()]
        width = max(len(e.term) for e in entries)
        for entry in entries:
            click.echo(f"{entry.term:<{width}}  {entry.summary}")
        click.echo("\nroletrail explain TERM says more (formula and published source).")
        return
    entry = glossary.lookup(" ".join(term))
    click.echo(glossary.as_text(entry, min(shutil.get_terminal_size((80, 24)).columns, 100)))


if __name__ == "__main__":  # pragma: no cover
    main()
