"""The ``roletrail`` command: a thin shell over :class:`tracker.api.Study`.

Each command parses options, calls the API verb of the same name and prints.
Errors a user can cause print one line and exit with status 2; the study is
left unchanged (every write is one transaction).
"""

from __future__ import annotations

import functools
import json
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
                  help="table for reading; csv or json for other programs.")
    @click.option("-o", "--output", type=click.Path(dir_okay=False, writable=True), default=None,
                  help="Write to this file instead of standard output.")
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        return func(*args, **kwargs)

    return wrapper


def _emit(frame: pd.DataFrame, fmt: str, output: str | None, title: str | None = None) -> None:
    write(render(frame, fmt, title=title), output)
    if output and output != "-":
        click.echo(f"wrote {len(frame)} rows to {output}", err=True)


def _progress_bar(label: str):
    """A rich progress callback (bytes done, bytes total), silent when not on a terminal."""
    from rich.progress import BarColumn, DownloadColumn, Progress, TimeRemainingColumn

    progress = Progress(
        "[progress.description]{task.description}", BarColumn(), DownloadColumn(), TimeRemainingColumn(),
        transient=True, disable=not sys.stderr.isatty(),
    )
    task = progress.add_task(label, total=None)

    def update(done: int, total: int) -> None:
        progress.update(task, completed=done, total=total)

    return progress, update


@click.group(cls=_Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.option("--db", envvar="ROLETRAIL_DB", default=None, metavar="PATH|URL",
              help="Study database: a SQLite file or any SQLAlchemy URL [env ROLETRAIL_DB; default roletrail.db].")
@click.version_option(__version__, prog_name="roletrail")
@click.pass_context
def main(ctx: click.Context, db: str | None) -> None:
    """Track how actors move between network positions over time."""
    ctx.ensure_object(dict)
    ctx.obj["db"] = db


@main.command("import")
@click.argument("file")
@click.option("--source", required=True, help="Column of the actor the event comes from.")
@click.option("--target", required=True, help="Column of the actor the event goes to.")
@click.option("--date", "date_col", help="Column of event dates (ISO dates or bare years).")
@click.option("--period", default="year", show_default=True, help="How to cut dates: year, quarter, month or Ny (N-year windows).")
@click.option("--period-origin", default=0, type=int, help="First year of some N-year window (default: windows start at multiples of N).")
@click.option("--period-column", help="Column holding the period label, instead of --date.")
@click.option("--relation", "relation_col", help="Column holding the relation (kind of tie).")
@click.option("--relation-name", help="One relation name for every row (default 'tie').")
@click.option("--weight", help="Column of event weights (default: each event counts 1).")
@click.option("--undirected", is_flag=True, help="The relation has no direction (A with B = B with A).")
@click.option("--date-format", multiple=True,
              help="strftime format of the dates, e.g. %d/%m/%Y; repeat it to accept several (tried in turn; 'iso' = ISO dates).")
@click.option("--delimiter", help="CSV delimiter (detected when omitted); 'tab' for tabs.")
@click.option("--replace", is_flag=True, help="Replace the earlier import of this content (or of this file name).")
@click.option("--errors", "errors", nargs=2, type=(click.Choice(["report"]), click.Path(dir_okay=False)), default=None,
              metavar="report FILE", help="Write every bad row (line, column, value, problem, fix) to FILE and import the others "
              "(default: stop at the first bad row, import nothing).")
@click.option("--duplicates", type=click.Choice(["keep", "drop"]), default="keep", show_default=True,
              help="Rows that repeat another row or an event already in the study: keep them (and count them) or drop them.")
@click.option("--memory-limit", default="1GB", show_default=True,
              help="Memory for summing a folder of files (DuckDB; beyond it work spills to disk).")
@click.pass_context
def import_cmd(ctx, file, source, target, date_col, period, period_origin, period_column, relation_col,
               relation_name, weight, undirected, date_format, delimiter, replace, errors, duplicates, memory_limit):
    """Import dated dyadic events from FILE: CSV, Parquet or Excel (.xlsx), or a folder or glob of CSV/Parquet files."""
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
@click.option("--actor", default="actor", show_default=True, help="Column of actor labels.")
@click.option("--first", help="Column of the first period (year or date) the actor is present.")
@click.option("--last", help="Column of the last period the actor is present.")
@click.option("--delimiter", help="CSV delimiter (detected when omitted).")
@click.option("--replace", is_flag=True, help="Replace the earlier import of this roster.")
@click.pass_context
def import_actors_cmd(ctx, file, actor, first, last, delimiter, replace):
    """Import a roster FILE: who exists when, with attributes (other columns)."""
    study = _study(ctx, create=True)
    report = study.import_actors(file, actor=actor, first=first, last=last, delimiter=delimiter, replace=replace)
    click.echo(f"imported roster {report['file']} as batch {report['batch']}: {report['rows_loaded']} actors, {report['new_actors']} new")


@main.command()
@listing
@click.pass_context
def summary(ctx, fmt, output):
    """One row per period and relation: actors, ties, density, reciprocity, isolates."""
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
    """List actors with their roster range, attributes and other names."""
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
    """List imported files."""
    _emit(_study(ctx).batches(), fmt, output, title="Imports")


@main.command()
@click.option("--repair", is_flag=True, help="First rebuild every tie from the raw events.")
@click.option("--all-fits", is_flag=True, help="Check every stored fit period (default: the latest 50).")
@click.pass_context
def check(ctx, repair, all_fits):
    """Verify the study; print each problem with its fix. Exit status 0 = no problem, 1 = problems."""
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


@main.command()
@click.argument("other_name")
@click.argument("actor")
@click.pass_context
def alias(ctx, other_name, actor):
    """Record OTHER_NAME as another name of ACTOR (merging them if both have events)."""
    result = _study(ctx).alias(other_name, actor)
    if result["merged"]:
        click.echo(f"merged {other_name!r} into {actor!r}: {result['events_moved']} events moved, ties rebuilt")
    else:
        click.echo(f"{other_name!r} now names {actor!r}")


@main.command()
@click.option("--period", required=True, help="New cut: year, quarter, month or Ny.")
@click.option("--period-origin", default=0, type=int, help="First year of some N-year window.")
@click.pass_context
def recut(ctx, period, period_origin):
    """Re-cut every dated event into new periods (no re-import needed)."""
    result = _study(ctx).recut(period, origin=period_origin)
    click.echo(f"re-cut {result['events']} events into {result['periods']} periods by {result['scheme']}")


def _periods_option(func):
    return click.option("--periods", "periods", multiple=True, metavar="PERIOD",
                        help="Only these periods (repeat the option, or give a comma-separated list).")(func)


def _split(values) -> list[str] | None:
    out = [v.strip() for value in values or () for v in str(value).split(",") if v.strip()]
    return out or None


@main.command()
@click.option("--method", default="structural", show_default=True,
              help="structural, concor, regular, optimize or sbm.")
@click.option("--positions", default="4", show_default=True, help="Positions of the tied actors per period, or 'auto'.")
@click.option("--criterion", default="zero-block", show_default=True,
              type=click.Choice(["zero-block", "one-block", "density", "max-value", "mean-value"]),
              help="How blocks become image cells.")
@click.option("--alpha", type=float, help="Density threshold of the density criterion (default: whole-network density).")
@click.option("--cut", type=float, help="Value threshold of the max-value criterion (default: median tie value).")
@click.option("--seed", default=0, show_default=True, type=int, help="Seed of every random step.")
@_periods_option
@click.option("--relation", "relations", multiple=True, help="Fit only these relations (jointly); default all.")
@click.option("--draws", default=99, show_default=True, type=int, help="Permutation-test draws per period (0 = no test).")
@click.option("--k-range", default="2-8", show_default=True, help="Range of positions tried by --positions auto.")
@click.option("--linkage", help="structural/regular: hierarchical-clustering linkage (average, complete, ward, single).")
@click.option("--measure", type=click.Choice(["euclidean", "correlation"]), help="structural: distance measure.")
@click.option("--restarts", type=int, help="optimize/sbm: random starts.")
@click.option("--exact", is_flag=True, help="regular: the exact maximal regular partition (binary data).")
@click.option("--degree-corrected", is_flag=True, help="sbm: degree-corrected model.")
@click.option("--model", "sbm_model", type=click.Choice(["poisson", "bernoulli"]), help="sbm: Poisson for event counts (default) or Bernoulli for binary ties.")
@click.option("--joint", is_flag=True, help="sbm: one dynamic model over all periods (positions mean the same in every period).")
@click.option("--smooth", "smoothing", default="auto", show_default=True,
              help="Penalty (nats) on changing position between consecutive periods: auto, off (each period alone) or a number.")
@click.pass_context
def fit(ctx, method, positions, criterion, alpha, cut, seed, periods, relations, draws, k_range, linkage, measure,
        restarts, exact, degree_corrected, sbm_model, joint, smoothing):
    """Find positions in every period (or --periods) and store the fit."""
    from rich.progress import Progress

    from tracker.errors import UsageError

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
        options["joint"] = True
    if smoothing not in ("auto",):
        if smoothing in ("off", "none", "no"):
            smoothing = 0.0
        else:
            try:
                smoothing = float(smoothing)
            except ValueError:
                raise UsageError(f"--smooth takes auto, off or a number, not {smoothing!r}") from None
    study = _study(ctx)
    selected = _split(periods)
    total = len(selected) if selected else len(study.periods())
    with Progress(transient=True, disable=not sys.stderr.isatty()) as bar:
        task = bar.add_task("fitting periods", total=total)
        result = study.fit(
            method=method, positions=positions, criterion=criterion, alpha=alpha, cut=cut, seed=seed,
            periods=selected, relations=_split(relations), draws=draws, k_min=k_min, k_max=k_max,
            options=options, smoothing=smoothing, progress=lambda _p: bar.advance(task),
        )
    click.echo(f"fit {result['fit']} ({method}, {criterion}, seed {seed}) is now current")
    _emit(result["periods"], "table", None)


@main.command()
@listing
@click.pass_context
def fits(ctx, fmt, output):
    """List stored fits; the current one is used by show, export, align ..."""
    frame = _study(ctx).fits()
    if fmt == "table":
        frame = frame.drop(columns=["params"])
    _emit(frame, fmt, output, title="Fits")


@main.command("use-fit")
@click.argument("fit_id", type=int)
@click.pass_context
def use_fit(ctx, fit_id):
    """Make stored fit FIT_ID the current one."""
    _study(ctx).use_fit(fit_id)
    click.echo(f"fit {fit_id} is now current")


@main.command()
@click.argument("period")
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.option("--relation", help="Only this relation.")
@click.pass_context
def show(ctx, period, fit_id, relation):
    """Show PERIOD's density table and image side by side."""
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    view = _study(ctx).show(period, fit=fit_id, relation=relation)
    row = view["fit_row"]
    console = Console(highlight=False)
    p = "-" if row["p_value"] is None or pd.isna(row["p_value"]) else f"{row['p_value']:.3f}"
    corr = "-" if row["density_correlation"] is None or pd.isna(row["density_correlation"]) else f"{row['density_correlation']:.3f}"
    console.print(Text(
        f"Period {view['period']} - fit {view['fit']}, criterion {view['criterion']}: "
        f"{row['positions']} positions, {row['inconsistencies']:g} inconsistencies, "
        f"density correlation {corr}, permutation p {p}" + (" (perfect fit)" if row["perfect_fit"] else "")
    ))
    for rel, parts in view["relations"].items():
        dens, img = parts["density"], parts["image"]
        table = Table(title=Text(f"{rel}: density | image"), header_style="bold")
        table.add_column("from \\ to")
        for col in dens.columns:
            table.add_column(Text(str(col).split(" ")[0]), justify="right")
        table.add_column("|")
        for col in img.columns:
            table.add_column(Text(str(col).split(" ")[0]), justify="center")
        for label in dens.index:
            cells = [Text(f"{v:.2f}") for v in dens.loc[label]]
            marks = [Text("1" if v else ".") for v in img.loc[label]]
            table.add_row(Text(str(label)), *cells, Text("|"), *marks)
        console.print(table)


@main.command()
@listing
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.option("--draws", default=199, show_default=True, type=int, help="Random images for the significance of each ideal.")
@click.option("--sentences/--no-sentences", default=True, help="Also print plain sentences about the changes (table format).")
@click.pass_context
def structures(ctx, fmt, output, fit_id, draws, sentences):
    """The closest ideal structure of each period's image, and when it changes."""
    study = _study(ctx)
    table = study.structures(fit=fit_id, draws=draws)
    _emit(_structures_frame(table), fmt, output, title="Ideal structures")
    if sentences and fmt == "table" and output is None:
        for line in study.structure_sentences(table):
            click.echo(line)


def _structures_frame(table: pd.DataFrame) -> pd.DataFrame:
    return table.drop(columns=["parts"], errors="ignore")


@main.command()
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.option("--overlap-weight", default=0.5, show_default=True, type=float,
              help="Weight of membership overlap against role similarity when linking positions.")
@click.option("--link-threshold", default=0.2, show_default=True, type=float, help="Least similarity to continue a track.")
@click.option("--split-threshold", default=0.3, show_default=True, type=float, help="Least overlap for a split or merge.")
@click.option("--max-gap", default=0, show_default=True, type=int, help="Periods a track may be missing and still continue.")
@click.option("--draws", default=20, show_default=True, type=int, help="Bootstrap draws for move confidence (0 = none).")
@click.option("--seed", type=int, help="Seed of the bootstrap (default: the fit's seed).")
@click.option("--rebuild", is_flag=True, help="Align every period again (track ids and names carried over by best match).")
@click.option("--include-isolates", is_flag=True, help="Count moves into and out of the no-tie track as moves.")
@click.pass_context
def align(ctx, fit_id, overlap_weight, link_threshold, split_threshold, max_gap, draws, seed, rebuild, include_isolates):
    """Link positions across periods into tracks; find moves and their confidence."""
    result = _study(ctx).align(
        fit=fit_id, weight_overlap=overlap_weight, link_threshold=link_threshold, split_threshold=split_threshold,
        max_gap=max_gap, draws=draws, seed=seed, rebuild=rebuild, include_isolates=include_isolates,
    )
    moves = result["moves"]
    low = int((moves["confidence"] < 0.5).sum()) if len(moves) else 0
    click.echo(
        f"fit {result['fit']}: {result['periods']} periods aligned ({result['new_periods']} new), "
        f"{int((result['tracks']['track'] > 0).sum())} tracks, {len(moves)} moves"
        + (f" ({low} with confidence below 0.5)" if draws and len(moves) else "")
    )
    _emit(result["tracks"], "table", None, title="Tracks")


@main.command()
@listing
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.pass_context
def tracks(ctx, fmt, output, fit_id):
    """List tracks (persistent positions) with their names and life span."""
    _emit(_study(ctx).tracks(fit_id), fmt, output, title="Tracks")


@main.command("name-track")
@click.argument("track", type=int)
@click.argument("name")
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.pass_context
def name_track(ctx, track, name, fit_id):
    """Give TRACK a NAME (kept through re-alignment and updates)."""
    _study(ctx).name_track(track, name, fit=fit_id)
    click.echo(f"track {track} is now named {name!r}")


@main.command()
@listing
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.option("--min-confidence", type=float, default=None, help="Only moves at least this sure (default: all, flagged).")
@click.pass_context
def moves(ctx, fmt, output, fit_id, min_confidence):
    """Who moved, from which track to which, when, and how sure."""
    frame = _study(ctx).moves(fit_id)
    if min_confidence is not None:
        frame = frame[frame["confidence"].fillna(0) >= min_confidence]
    if fmt == "table":
        frame = frame.assign(note=["low confidence" if c < 0.5 else "" for c in frame["confidence"].fillna(1.0)])
    _emit(frame, fmt, output, title="Moves")
    if fmt == "table" and output is None:
        click.echo("confidence: share of bootstrap refits that reproduce the move; a move below 0.5 may be noise.")


@main.command()
@listing
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.pass_context
def transitions(ctx, fmt, output, fit_id):
    """Transition counts and shares between tracks, per step and pooled."""
    _emit(_study(ctx).transitions(fit_id), fmt, output, title="Transitions")


EXPORTS = ("memberships", "blocks", "fit-periods", "structures", "moves", "transitions", "tracks", "mobility",
           "trajectories", "graphml")


@main.command()
@click.argument("what", type=click.Choice(EXPORTS))
@click.option("--format", "fmt", type=click.Choice(["csv", "json"]), default="csv", show_default=True)
@click.option("-o", "--output", type=click.Path(dir_okay=False), default=None, help="File to write (default: standard output).")
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.pass_context
def export(ctx, what, fmt, output, fit_id):
    """Export results of the current fit (graphml: one file per period into folder -o)."""
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
        return study.memberships(fit_id)
    if what == "blocks":
        return study.blocks(fit_id)
    if what == "structures":
        return _structures_frame(study.structures(fit=fit_id))
    if what in ("moves", "transitions", "tracks", "mobility", "trajectories"):
        return getattr(study, what)(fit_id)
    frame = study.fit_periods(fit_id)
    frame["diagnostics"] = [json.dumps(d) for d in frame["diagnostics"]]
    return frame


@main.command()
@click.option("-o", "--output", default="roletrail-report.html", show_default=True, type=click.Path(dir_okay=False),
              help="The HTML file to write.")
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.option("--anonymise", is_flag=True, help="Replace actor labels with codes (A001 ...) everywhere.")
@click.option("--structure-draws", default=199, show_default=True, type=int,
              help="Random images for the significance of ideal structures.")
@click.pass_context
def report(ctx, output, fit_id, anonymise, structure_draws):
    """Write the self-contained offline HTML report (one file; no network needed)."""
    path = _study(ctx).report(output, fit=fit_id, anonymise=anonymise, structure_draws=structure_draws)
    click.echo(f"wrote {path}")


@main.command()
@click.argument("name")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), help="File: .png, .svg or .json (Vega-Lite).")
@click.option("--fit", "fit_id", type=int, help="A stored fit (default: the current one).")
@click.option("--actor", help="trajectory: the actor shown first.")
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
@click.option("--draws", default=10, show_default=True, type=int, help="Bootstrap draws for move confidence.")
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


if __name__ == "__main__":  # pragma: no cover
    main()
