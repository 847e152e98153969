"""Replication files: a whole analysis written down, replayed, and checked result by result.

An *analysis file* (TOML) lists the steps that make a study's results, in the
order they are replayed:

``[analysis]``
    ``format`` (1), ``title``, ``written_by``, ``current_fit`` (the fit other
    commands use afterwards) and ``results`` (the file of recorded results).
``[[import]]``
    ``kind`` (``events`` or ``roster``), ``file`` (relative to the analysis
    file, or to ``--data DIR``), ``sha256`` (the file's content hash; replay
    refuses a file whose content changed) and the import's options, named as
    in :meth:`tracker.api.Study.import_events` / :meth:`~tracker.api.Study.import_actors`.
``[[alias]]``
    ``name`` (another spelling) and ``actor``.
``[[fit]]``
    ``id`` (how the later steps refer to it), optional ``periods``, and every
    setting of :meth:`tracker.api.Study.fit` (method, positions, criterion,
    seed, options ...).
``[[align]]``
    ``fit`` and the settings of :meth:`tracker.api.Study.align` (seed included).
``[[track_name]]``
    ``fit``, ``track`` and ``name``.
``[report]``
    ``file``, ``fit`` and the options of :meth:`tracker.api.Study.report`.

:func:`record` writes such a file from an existing study (the batches keep
each import's mapping, the fits their settings, the alignments theirs), next to
a *results file* (JSON) holding every stored result: per fit the fitted
periods, memberships, blocks, tracks, track positions, links and moves with
their confidences.  :func:`replay` runs the steps into a new, empty study.
:func:`replicate` replays into a temporary study and compares each stored
result with the recorded one: labels, counts and other integers must be equal;
floating-point values are compared exactly by default (the same code, data and
seeds give the same bits; a ``tolerance`` may be stated for another platform's
arithmetic, and is then reported).

A study built interactively may differ from its replay where the order of the
work mattered (a fit extended period by period, an alignment continued after new
data): each step is replayed once over everything.  :func:`replicate` says so
by listing the differences rather than hiding them.

Nothing in this module runs SQL or prints: it works over :class:`tracker.api.Study`
and reports through the ``say`` callback.
"""

from __future__ import annotations

import inspect
import json
import math
import platform
import sys
import tempfile
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from tracker.errors import InputError, UsageError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10
    import tomli as tomllib

__all__ = [
    "FORMAT", "Analysis", "Difference", "Replication", "read_analysis", "write_analysis", "record", "replay",
    "replicate", "run", "check_data", "read_results", "results_of", "compare_results", "versions", "RESULT_TABLES",
]

FORMAT = 1
RESULTS_SUFFIX = ".results.json"

#: Stored results compared per fit, with the columns that identify a row (None: compared in stored order).
RESULT_TABLES: dict[str, tuple[str, ...] | None] = {
    "fit_periods": ("period",),
    "memberships": ("period", "actor"),
    "blocks": ("period", "relation", "from_position", "to_position"),
    "tracks": ("track",),
    "track_positions": ("period", "position"),
    "track_links": None,
    "moves": ("actor", "from_period", "to_period"),
}

_SECTIONS = ("analysis", "import", "alias", "fit", "align", "track_name", "report")

Say = Callable[[str], None]


def _quiet(_text: str) -> None:
    return None


# --------------------------------------------------------------------------- the analysis file


@dataclass
class Analysis:
    """An analysis file, read and checked (see the module docstring for its sections)."""

    path: Path
    imports: list[dict] = field(default_factory=list)
    aliases: list[dict] = field(default_factory=list)
    fits: list[dict] = field(default_factory=list)
    aligns: list[dict] = field(default_factory=list)
    track_names: list[dict] = field(default_factory=list)
    report: dict | None = None
    title: str | None = None
    current_fit: int | None = None
    results: str | None = None
    written_by: str | None = None

    @property
    def results_path(self) -> Path:
        """The recorded results: ``results`` relative to the analysis file, or ``<name>.results.json``."""
        name = self.results or self.path.with_suffix("").name + RESULTS_SUFFIX
        return self.path.parent / name

    def seeds(self) -> list[str]:
        """One line per fit: its seed and the seed of its alignment."""
        aligns = {a["fit"]: a for a in self.aligns}
        out = []
        for fit in self.fits:
            line = f"fit {fit['id']} ({fit['settings'].get('method', 'structural')}): seed {fit['settings'].get('seed', 0)}"
            if fit["id"] in aligns:
                seed = aligns[fit["id"]]["settings"].get("seed")
                line += f"; alignment seed {seed if seed is not None else 'as the fit'}"
            out.append(line)
        return out


def read_analysis(path: str | Path) -> Analysis:
    """Read and check an analysis file; an :class:`InputError` names the section, entry and key at fault."""
    path = Path(path)
    name = path.name
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("does not exist", file=str(path), fix="check the path; roletrail run --record FILE writes one "
                         "from a study") from None
    except UnicodeDecodeError:
        raise InputError("is not UTF-8 text", file=name, fix="save the analysis file as UTF-8") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"is not valid TOML ({exc})", file=name, fix="correct the line named, or write the file "
                         "again with roletrail run --record") from None
    unknown = [k for k in raw if k not in _SECTIONS]
    if unknown:
        raise InputError(f"has an unknown section [{unknown[0]}]", file=name,
                         fix=f"the sections are {', '.join(_SECTIONS)}")
    head = _table(raw.get("analysis", {}), name, "[analysis]")
    extra = [k for k in head if k not in ("format", "title", "written_by", "current_fit", "results")]
    if extra:
        raise InputError(f"[analysis] has an unknown key {extra[0]!r}", file=name,
                         fix="its keys are format, title, written_by, current_fit and results")
    fmt = head.get("format", FORMAT)
    if not isinstance(fmt, int) or fmt > FORMAT:
        raise InputError(f"is an analysis file of format {fmt!r}, newer than this roletrail reads ({FORMAT})",
                         file=name, fix="upgrade roletrail (pip install -U roletrail)")
    analysis = Analysis(path=path, title=head.get("title"), current_fit=head.get("current_fit"),
                        results=head.get("results"), written_by=head.get("written_by"))
    for i, entry in enumerate(_tables(raw, "import", name), 1):
        where = f"[[import]] {i}"
        kind = entry.pop("kind", "events")
        if kind not in ("events", "roster"):
            raise InputError(f"{where}: kind must be 'events' or 'roster'", file=name, value=kind)
        file = _required(entry, "file", str, name, where)
        sha = entry.pop("sha256", None)
        if sha is not None and (not isinstance(sha, str) or len(sha) != 64
                                or any(c not in "0123456789abcdef" for c in sha.lower())):
            raise InputError(f"{where}: sha256 must be 64 hexadecimal digits", file=name, value=sha,
                             fix="copy the hash from roletrail batches, or remove the line")
        analysis.imports.append({"kind": kind, "file": file, "sha256": sha.lower() if sha else None, "options": entry})
    for i, entry in enumerate(_tables(raw, "alias", name), 1):
        where = f"[[alias]] {i}"
        analysis.aliases.append({"name": _required(entry, "name", str, name, where),
                                 "actor": _required(entry, "actor", str, name, where)})
        _no_more(entry, name, where)
    ids = set()
    for i, entry in enumerate(_tables(raw, "fit", name), 1):
        where = f"[[fit]] {i}"
        fit_id = entry.pop("id", i)
        if not isinstance(fit_id, int) or fit_id in ids:
            raise InputError(f"{where}: id must be a whole number used by no other fit", file=name, value=fit_id)
        ids.add(fit_id)
        periods = entry.pop("periods", None)
        if periods is not None and not isinstance(periods, list):
            raise InputError(f"{where}: periods must be a list such as [\"2019\", \"2020\"]", file=name, value=periods)
        analysis.fits.append({"id": fit_id, "periods": None if periods is None else [str(p) for p in periods],
                              "settings": entry})
    for section, target in (("align", analysis.aligns), ("track_name", analysis.track_names)):
        for i, entry in enumerate(_tables(raw, section, name), 1):
            where = f"[[{section}]] {i}"
            fit_id = entry.pop("fit", analysis.fits[-1]["id"] if analysis.fits else None)
            if fit_id not in ids:
                raise InputError(f"{where}: fit {fit_id!r} is not the id of a [[fit]] of this file", file=name,
                                 fix=f"use one of {', '.join(map(str, sorted(ids))) or '(no fits)'}")
            if section == "align":
                target.append({"fit": fit_id, "settings": entry})
            else:
                track = _required(entry, "track", int, name, where)
                target.append({"fit": fit_id, "track": track, "name": _required(entry, "name", str, name, where)})
                _no_more(entry, name, where)
    if "report" in raw:
        entry = _table(raw["report"], name, "[report]")
        fit_id = entry.pop("fit", analysis.current_fit if analysis.current_fit is not None
                           else (analysis.fits[-1]["id"] if analysis.fits else None))
        if fit_id not in ids:
            raise InputError(f"[report]: fit {fit_id!r} is not the id of a [[fit]] of this file", file=name)
        analysis.report = {"file": _required(entry, "file", str, name, "[report]"), "fit": fit_id, "options": entry}
    if analysis.current_fit is not None and analysis.current_fit not in ids:
        raise InputError(f"[analysis]: current_fit {analysis.current_fit!r} is not the id of a [[fit]]", file=name)
    return analysis


def write_analysis(analysis: Analysis, path: str | Path | None = None) -> Path:
    """Write an analysis file (TOML, with a header saying how to use it); returns its path."""
    from tracker import __version__

    path = Path(path or analysis.path)
    head = {"format": FORMAT, "title": analysis.title, "written_by": f"roletrail {__version__}",
            "current_fit": analysis.current_fit, "results": analysis.results}
    doc: dict = {"analysis": _drop_none(head)}
    doc["import"] = [_drop_none({"kind": i["kind"], "file": i["file"], "sha256": i["sha256"], **i["options"]})
                     for i in analysis.imports]
    doc["alias"] = [dict(a) for a in analysis.aliases]
    doc["fit"] = [_drop_none({"id": f["id"], **_ordered(f["settings"], _FIRST_SETTINGS), "periods": f["periods"]})
                  for f in analysis.fits]
    doc["align"] = [_drop_none({"fit": a["fit"], **a["settings"]}) for a in analysis.aligns]
    doc["track_name"] = [dict(t) for t in analysis.track_names]
    if analysis.report:
        doc["report"] = _drop_none({"file": analysis.report["file"], "fit": analysis.report["fit"],
                                    **analysis.report["options"]})
    today = datetime.now(timezone.utc).strftime("%Y-%m-%d")
    header = (
        f"# roletrail analysis file (format {FORMAT}), written by roletrail {__version__} on {today}.\n"
        "# Replay it into a new study:          roletrail --db NEW.db run THIS-FILE\n"
        "# Check every result against the record: roletrail replicate THIS-FILE\n"
        "# Data files are looked up next to this file (or in --data DIR) and must have the SHA-256 listed.\n"
    )
    parts = [header]
    for section in _SECTIONS:  # in replay order, each entry as its own table
        value = doc.get(section)
        if value:
            for entry in value if isinstance(value, list) else [value]:
                parts.append(_toml_table(section, entry, array=isinstance(value, list)))
    path.write_text("\n".join(parts), encoding="utf-8")
    return path


# --------------------------------------------------------------------------- record


def record(study, path: str | Path, *, report: str | None = None, title: str | None = None,
           say: Say = _quiet) -> dict:
    """Write the analysis file ``path`` and its results file from an existing study.

    Imports come from the study's batches (oldest first, each with its mapping;
    dated event files are cut by the study's present period scheme, so a later
    ``recut`` is part of the import), aliases from the actors' other names,
    fits in the order they were made with all their settings (and the periods
    fitted, when not all), each fit's alignment settings, the track names, and
    a report step when ``report`` names its file.  Returns ``{"analysis",
    "results", "steps", "notes"}``; ``notes`` are things to act on (a data file
    not next to the analysis file, an import option this roletrail cannot
    replay).
    """
    from tracker.pipeline.fitting import is_dynamic

    path = Path(path)
    notes: list[str] = []
    analysis = Analysis(path=path, title=title, results=path.with_suffix("").name + RESULTS_SUFFIX)
    scheme = study.store.period_scheme()
    signatures = {"events": _parameters(study.import_events), "roster": _parameters(study.import_actors)}
    for batch in study.store.import_records():
        options = {k: v for k, v in batch["mapping"].items() if v is not None}
        if batch["kind"] == "events" and scheme is not None and scheme.dated and options.get("date"):
            options.update(_scheme_options(scheme))
        dropped = sorted(k for k in options if k not in signatures[batch["kind"]])
        if dropped:
            notes.append(f"import of {batch['file']}: left out {', '.join(dropped)} (not an option of this roletrail)")
        options = {k: v for k, v in options.items() if k not in dropped}
        analysis.imports.append({"kind": batch["kind"], "file": batch["file"], "sha256": batch["sha256"],
                                 "options": options})
        local = path.parent / batch["file"]
        if not local.is_file():
            notes.append(f"{batch['file']} is not next to {path.name}: copy it there (or pass --data DIR when replaying)")
        elif _file_hash(local) != batch["sha256"]:
            notes.append(f"{batch['file']} next to {path.name} is not the file that was imported (SHA-256 differs)")
    analysis.aliases = [{"name": a, "actor": b} for a, b in study.store.alias_pairs()]
    fits = study.fits()
    all_periods = study.periods()
    for row in fits.itertuples(index=False):
        fit_id = int(row.fit)
        settings = {k: v for k, v in json.loads(row.params).items() if v is not None and v != {}}
        if is_dynamic(settings):
            settings.pop("smoothing", None)  # stored as 0 (no penalty ran); the dynamic model refuses --smooth
        fitted = study.store.fit_periods(fit_id)["period"].tolist()
        analysis.fits.append({"id": fit_id, "settings": settings,
                              "periods": None if fitted == all_periods else fitted})
        if bool(row.current):
            analysis.current_fit = fit_id
        params = study.store.alignment_params(fit_id)
        if params is not None:
            from tracker.pipeline.tracking import alignment_settings

            analysis.aligns.append({"fit": fit_id, "settings": {k: v for k, v in alignment_settings(params).items()
                                                                if v is not None}})
            tracks = study.store.tracks(fit_id)
            for track, name in zip(tracks["track"], tracks["name"]):
                if isinstance(name, str) and name:
                    analysis.track_names.append({"fit": fit_id, "track": int(track), "name": name})
    if report and analysis.fits:
        fit_id = analysis.current_fit if analysis.current_fit is not None else analysis.fits[-1]["id"]
        analysis.report = {"file": str(report), "fit": fit_id, "options": {"structure_draws": 199}}
    write_analysis(analysis, path)
    results = _write_results(results_of(study, {f["id"]: f["id"] for f in analysis.fits}), analysis.results_path)
    for note in notes:
        say(f"note: {note}")
    steps = {"imports": len(analysis.imports), "aliases": len(analysis.aliases), "fits": len(analysis.fits),
             "alignments": len(analysis.aligns), "track names": len(analysis.track_names),
             "report": int(analysis.report is not None)}
    return {"analysis": path, "results": results, "steps": steps, "notes": notes}


def _scheme_options(scheme) -> dict:
    if scheme.kind == "window":
        return {"period": f"{scheme.years}y", "period_origin": int(scheme.origin)}
    return {"period": scheme.kind, "period_origin": 0}


# --------------------------------------------------------------------------- replay


def check_data(analysis: Analysis, data_dir: str | Path | None = None, *, require_hash: bool = False) -> list[Path]:
    """Each import's file, found and unchanged (same SHA-256); an :class:`InputError` otherwise.

    Checked before anything is replayed, so a changed file changes nothing.
    """
    base = Path(data_dir) if data_dir is not None else analysis.path.parent
    found = []
    for i, entry in enumerate(analysis.imports, 1):
        path = base / entry["file"]
        if not path.is_file():
            raise InputError(f"import {i} needs {entry['file']}, which is not in {base}", file=analysis.path.name,
                             fix="put the data file there, or pass --data DIR with the folder that holds it")
        if entry["sha256"] is None:
            if require_hash:
                raise InputError(f"import {i} ({entry['file']}) has no sha256, so its data cannot be confirmed",
                                 file=analysis.path.name,
                                 fix=f"add sha256 = \"{_file_hash(path)}\" if this is the file analysed, "
                                     "or write the file with roletrail run --record")
        else:
            actual = _file_hash(path)
            if actual != entry["sha256"]:
                raise InputError(
                    f"has changed since the analysis was recorded (SHA-256 {actual[:12]}..., recorded "
                    f"{entry['sha256'][:12]}...); nothing was replayed", file=str(path),
                    fix="restore the original data file; to analyse the new data, run the analysis on it and "
                        "record it again (roletrail run --record)")
        found.append(path)
    return found


def replay(analysis: Analysis, study, *, data_dir: str | Path | None = None, report_dir: str | Path | None = None,
           skip_report: bool = False, files: list[Path] | None = None, say: Say = _quiet) -> dict[int, int]:
    """Run the analysis file's steps into ``study``, which must hold no data yet.

    Returns the fit ids: analysis-file id -> the study's id.  Report files are
    written relative to ``report_dir`` (default: the analysis file's folder).
    ``files`` are the data files already found by :func:`check_data` (checked
    here otherwise).
    """
    from tracker.pipeline.fitting import is_dynamic

    files = check_data(analysis, data_dir) if files is None else files
    counts = study.store.counts()
    if counts["batches"] or len(study.fits()):
        raise UsageError(f"the study already holds {counts['batches']} imports and {len(study.fits())} fits; "
                         "an analysis is replayed into a new, empty study: give another --db")
    name = analysis.path.name
    for i, (entry, path) in enumerate(zip(analysis.imports, files), 1):
        method = study.import_events if entry["kind"] == "events" else study.import_actors
        result = _call(method, entry["options"], name, f"[[import]] {i}", path)
        say(f"import {i}: {entry['file']} ({entry['kind']}), {result.get('rows_loaded', 0)} rows loaded")
    for entry in analysis.aliases:
        study.alias(entry["name"], entry["actor"])
        say(f"alias: {entry['name']!r} names {entry['actor']!r}")
    fit_map: dict[int, int] = {}
    for i, entry in enumerate(analysis.fits, 1):
        options = dict(entry["settings"])
        if options.get("positions") != "auto":
            # The range of K is a setting of --positions auto only; a fixed K refuses it.
            options.pop("k_min", None)
            options.pop("k_max", None)
        if entry["periods"] is not None:
            options["periods"] = entry["periods"]
        if is_dynamic(options) and options.get("smoothing") in (0, "off"):
            # Files recorded before the dynamic model refused --smooth carry the 0 that every
            # dynamic fit stored (no penalty ran); replaying without it runs the same fit.
            options.pop("smoothing")
        result = _call(study.fit, options, name, f"[[fit]] {i}")
        fit_map[entry["id"]] = int(result["fit"])
        say(f"fit {entry['id']}: {study.fit_info(int(result['fit']))['method']}, seed {options.get('seed', 0)}, "
            f"{len(result['periods'])} periods")
    for i, entry in enumerate(analysis.aligns, 1):
        result = _call(study.align, entry["settings"], name, f"[[align]] {i}", fit=fit_map[entry["fit"]])
        say(f"align fit {entry['fit']}: {int((result['tracks']['track'] > 0).sum())} tracks, "
            f"{len(result['moves'])} moves")
    for entry in analysis.track_names:
        study.name_track(entry["track"], entry["name"], fit=fit_map[entry["fit"]])
        say(f"track {entry['track']} of fit {entry['fit']} named {entry['name']!r}")
    if analysis.current_fit is not None:
        study.use_fit(fit_map[analysis.current_fit])
    if analysis.report and not skip_report:
        target = Path(report_dir) if report_dir is not None else analysis.path.parent
        out = _call(study.report, analysis.report["options"], name, "[report]", target / analysis.report["file"],
                    fit=fit_map[analysis.report["fit"]])
        say(f"report: {out}")
    return fit_map


def run(path: str | Path, db: str | None, *, data_dir: str | Path | None = None, skip_report: bool = False,
        say: Say = _quiet) -> dict:
    """Read an analysis file and replay it into the study ``db`` (new or empty).

    When ``db`` is a SQLite file that did not exist before and a step fails,
    the half-built file is removed, so a failed run leaves nothing behind.
    Returns ``{"analysis", "fits" (file id -> study id), "study"}``.
    """
    from tracker.api import Study
    from tracker.store.database import resolve_url, sqlite_path

    analysis = read_analysis(path)
    files = check_data(analysis, data_dir)
    for i, entry in enumerate(analysis.imports, 1):
        if entry["sha256"] is None:
            say(f"note: import {i} ({entry['file']}) has no sha256, so replicate cannot confirm its data; "
                "roletrail run --record writes a file with every hash")
    file = sqlite_path(resolve_url(db))
    new_file = file is not None and not file.exists()
    try:
        with Study(db) as study:
            fits = replay(analysis, study, data_dir=data_dir, skip_report=skip_report, files=files, say=say)
            where = str(study.path or study.engine.url.render_as_string(hide_password=True))
    except BaseException:
        if new_file:
            for suffix in ("", "-wal", "-shm", "-journal"):
                Path(str(file) + suffix).unlink(missing_ok=True)
        raise
    return {"analysis": analysis, "fits": fits, "study": where}


def _call(method, options: dict, file: str, where: str, *args, **fixed):
    """Call a Study verb with the options of one step; an unknown option is an error naming it."""
    known = _parameters(method)
    unknown = [k for k in options if k not in known or k in fixed]
    if unknown:
        raise InputError(f"{where}: {unknown[0]!r} is not a setting this roletrail knows", file=file,
                         fix=f"the settings are {', '.join(sorted(k for k in known if k not in fixed and k != 'progress'))}")
    return method(*args, **options, **fixed)


def _parameters(method) -> set[str]:
    return {name for name, p in inspect.signature(method).parameters.items()
            if p.kind in (p.KEYWORD_ONLY, p.POSITIONAL_OR_KEYWORD)}


# --------------------------------------------------------------------------- results


def versions() -> dict[str, str]:
    """Versions of roletrail, Python and the numerical libraries that decide the results."""
    from importlib.metadata import PackageNotFoundError, version

    from tracker import __version__

    out = {"roletrail": __version__, "python": platform.python_version()}
    for package in ("numpy", "scipy", "pandas", "scikit-learn"):
        try:
            out[package] = version(package)
        except PackageNotFoundError:  # pragma: no cover
            out[package] = "not installed"
    return out


def results_of(study, fits: dict[int, int]) -> dict:
    """Every stored result of ``study`` for the fits named (analysis id -> study fit id), as plain data."""
    imports = pd.DataFrame(study.store.import_records(),
                           columns=["batch", "kind", "file", "sha256", "mapping", "rows_read", "rows_loaded",
                                    "self_ties_dropped"])
    data = {
        "imports": _plain_table(imports.drop(columns=["batch", "mapping"])),
        "periods": list(study.periods()),
        "actors": [str(a) for a in study.actors()["actor"]],
        "relations": [[r.name, bool(r.directed)] for r in study.store.relations()],
    }
    out = {"format": FORMAT, "versions": versions(),
           "written_at": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC"), "data": data, "fits": {}}
    store = study.store
    for key, fit_id in fits.items():
        info = store.current_fit(fit_id)
        tables = {
            "fit_periods": store.fit_periods(fit_id),
            "memberships": store.memberships(fit_id),
            "blocks": store.blocks(fit_id),
            "tracks": store.tracks(fit_id),
            "track_positions": store.track_positions(fit_id),
            "track_links": store.track_links(fit_id),
            "moves": store.moves(fit_id),
        }
        out["fits"][str(key)] = {
            "settings": _plain(info["params"]), "alignment": _plain(store.alignment_params(fit_id)),
            "tables": {name: _plain_table(frame) for name, frame in tables.items()},
        }
    return out


def _write_results(results: dict, path: Path) -> Path:
    # One line per table row: readable with any text tool, exact floats (repr round-trips).
    lines = ["{", f'"format": {FORMAT},', f'"versions": {json.dumps(results["versions"], sort_keys=True)},',
             f'"written_at": {json.dumps(results["written_at"])},',
             f'"data": {json.dumps(results["data"], sort_keys=True, allow_nan=False)},', '"fits": {']
    fits = list(results["fits"].items())
    for i, (key, fit) in enumerate(fits):
        lines.append(f"{json.dumps(key)}: {{")
        lines.append(f'"settings": {json.dumps(fit["settings"], sort_keys=True, allow_nan=False)},')
        lines.append(f'"alignment": {json.dumps(fit["alignment"], sort_keys=True, allow_nan=False)},')
        lines.append('"tables": {')
        names = list(fit["tables"])
        for j, name in enumerate(names):
            table = fit["tables"][name]
            rows = ",\n".join(json.dumps(r, allow_nan=False) for r in table["rows"])
            lines.append(f'{json.dumps(name)}: {{"columns": {json.dumps(table["columns"])}, "rows": [\n{rows}\n]}}'
                         + ("," if j < len(names) - 1 else ""))
        lines.append("}}" + ("," if i < len(fits) - 1 else ""))
    lines += ["}", "}"]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def read_results(path: str | Path) -> dict:
    """A results file written by :func:`record`; an :class:`InputError` if it is missing or damaged."""
    path = Path(path)
    try:
        results = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError("does not exist, so there are no recorded results to compare with", file=str(path),
                         fix="write it with roletrail run --record, or compare with a study (--against STUDY)") from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"is not a results file ({exc})", file=path.name,
                         fix="restore it from the deposit, or write it again with roletrail run --record") from None
    if not isinstance(results, dict) or not isinstance(results.get("fits"), dict):
        raise InputError("is not a results file (no fits)", file=path.name,
                         fix="restore it from the deposit, or write it again with roletrail run --record")
    return results


def _plain(value):
    """JSON-ready Python values: numpy scalars unwrapped, NaN and missing as None, dates as ISO text."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_plain(v) for v in value]
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return None if math.isnan(value) else float(value)
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return str(value) if not isinstance(value, str) else value


def _plain_table(frame: pd.DataFrame) -> dict:
    columns = [str(c) for c in frame.columns]
    rows = [[_plain(v) for v in row] for row in frame.astype(object).itertuples(index=False, name=None)]
    return {"columns": columns, "rows": rows}


# --------------------------------------------------------------------------- compare


@dataclass(frozen=True)
class Difference:
    """One way the replay differs from the record."""

    where: str
    detail: str

    def __str__(self) -> str:
        return f"{self.where}: {self.detail}"


def compare_results(expected: dict, actual: dict, *, tolerance: float = 0.0, limit: int = 10,
                    names: tuple[str, str] = ("recorded", "replayed")) -> tuple[list[Difference], dict]:
    """Every difference between two results (from :func:`results_of`), and the rows compared per table.

    Text, booleans and integers (labels, counts, positions, tracks) must be
    equal.  Floating-point values must be equal, or differ by at most
    ``tolerance`` (absolute); two missing values (NaN) are equal.  Per table at
    most ``limit`` rows are described, then the count of the rest.
    """
    if tolerance < 0:
        raise UsageError("the tolerance must be 0 or more")
    diffs: list[Difference] = []
    compared: dict[str, int] = {}
    exp_data, act_data = expected.get("data", {}), actual.get("data", {})
    for key in ("periods", "actors", "relations"):
        a, b = exp_data.get(key), act_data.get(key)
        if a != b:
            only_a = [x for x in a or [] if x not in (b or [])]
            only_b = [x for x in b or [] if x not in (a or [])]
            detail = (f"{len(a or [])} {names[0]}, {len(b or [])} {names[1]}"
                      + (f"; only {names[0]}: {_few(only_a)}" if only_a else "")
                      + (f"; only {names[1]}: {_few(only_b)}" if only_b else ""))
            diffs.append(Difference(f"data {key}", detail if (only_a or only_b) else detail + "; order differs"))
    if "imports" in exp_data and "imports" in act_data:
        diffs += _compare_table("data imports", exp_data["imports"], act_data["imports"], None, tolerance, limit, names)
        compared["imports"] = len(act_data["imports"]["rows"])
    for key, fit in expected["fits"].items():
        other = actual["fits"].get(key)
        if other is None:
            diffs.append(Difference(f"fit {key}", f"{names[1]} results have no such fit"))
            continue
        for part in ("settings", "alignment"):
            if not _same(fit.get(part), other.get(part), 0.0):
                diffs.append(Difference(f"fit {key} {part}", f"{fit.get(part)} {names[0]}, {other.get(part)} {names[1]}"))
        for name, keys in RESULT_TABLES.items():
            a, b = fit["tables"].get(name), other["tables"].get(name)
            if a is None and b is None:
                continue
            if a is None or b is None:
                diffs.append(Difference(f"fit {key} {name}", f"missing from the {names[0] if a is None else names[1]} results"))
                continue
            diffs += _compare_table(f"fit {key} {name}", a, b, keys, tolerance, limit, names)
            compared[f"fit {key} {name}"] = len(b["rows"])
    for key in actual["fits"]:
        if key not in expected["fits"]:
            diffs.append(Difference(f"fit {key}", f"{names[0]} results have no such fit"))
    return diffs, compared


def _compare_table(where: str, a: dict, b: dict, keys, tolerance: float, limit: int,
                   names: tuple[str, str]) -> list[Difference]:
    left = pd.DataFrame(a["rows"], columns=a["columns"], dtype=object)
    right = pd.DataFrame(b["rows"], columns=b["columns"], dtype=object)
    out: list[Difference] = []
    if list(left.columns) != list(right.columns):
        missing = [c for c in left.columns if c not in right.columns]
        extra = [c for c in right.columns if c not in left.columns]
        out.append(Difference(where, f"columns differ (only {names[0]}: {_few(missing)}; only {names[1]}: {_few(extra)})"))
        common = [c for c in left.columns if c in right.columns]
        left, right = left[common], right[common]
    if keys is None or not set(keys) <= set(left.columns):
        keys = ("row",)
        left.insert(0, "row", range(1, len(left) + 1))
        right.insert(0, "row", range(1, len(right) + 1))
    keys = list(keys)
    for frame in (left, right):
        frame["_key"] = [json.dumps(list(k)) for k in frame[keys].itertuples(index=False, name=None)]
    if left["_key"].duplicated().any() or right["_key"].duplicated().any():
        # Keys that repeat (should not happen) fall back to comparing rows in order.
        for frame in (left, right):
            frame["_key"] = [json.dumps([i]) for i in range(len(frame))]
    merged = left.merge(right, on="_key", how="outer", suffixes=("\0a", "\0b"), indicator=True)
    lines: list[str] = []
    for side, label in (("left_only", f"only in the {names[0]} results"), ("right_only", f"only in the {names[1]} results")):
        rows = merged[merged["_merge"] == side]
        for key in rows["_key"]:
            lines.append(f"{_describe_key(keys, key)}: {label}")
    both = merged[merged["_merge"] == "both"]
    value_cols = [c for c in left.columns if c not in keys and c != "_key"]
    bad = np.zeros(len(both), dtype=bool)
    per_col = {}
    for col in value_cols:
        x, y = both[col + "\0a"].tolist(), both[col + "\0b"].tolist()
        differs = np.array([not _same(u, v, tolerance) for u, v in zip(x, y)], dtype=bool)
        per_col[col] = (differs, x, y)
        bad |= differs
    for i in np.flatnonzero(bad):
        parts = [f"{col} {_show(x[i])} {names[0]}, {_show(y[i])} {names[1]}"
                 for col, (differs, x, y) in per_col.items() if differs[i]]
        lines.append(f"{_describe_key(keys, both['_key'].iloc[i])}: {'; '.join(parts)}")
    for line in lines[:limit]:
        out.append(Difference(where, line))
    if len(lines) > limit:
        out.append(Difference(where, f"... and {len(lines) - limit} more rows differ (of {max(len(left), len(right))})"))
    return out


def _same(a, b, tolerance: float) -> bool:
    """Equal as stored results: exact for text, integers and booleans; floats within ``tolerance``; None == None."""
    if a is None or b is None:
        return a is None and b is None
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_same(a[k], b[k], tolerance) for k in a)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same(u, v, tolerance) for u, v in zip(a, b))
    if isinstance(a, bool) or isinstance(b, bool) or isinstance(a, str) or isinstance(b, str):
        return type(a) is type(b) and a == b
    if isinstance(a, float) or isinstance(b, float):
        if not isinstance(a, (int, float)) or not isinstance(b, (int, float)):
            return False
        return a == b or abs(float(a) - float(b)) <= tolerance
    return a == b


def _describe_key(keys: list[str], key: str) -> str:
    return ", ".join(f"{k} {_show(v)}" for k, v in zip(keys, json.loads(key)))


def _show(value) -> str:
    if isinstance(value, str):
        return repr(value)
    if value is None:
        return "missing"
    if isinstance(value, float):
        return repr(value)
    text = json.dumps(value) if isinstance(value, (dict, list)) else str(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _few(values: list, n: int = 5) -> str:
    shown = ", ".join(_show(v) for v in values[:n])
    return shown + (f" (+{len(values) - n} more)" if len(values) > n else "") if values else "none"


# --------------------------------------------------------------------------- replicate


@dataclass
class Replication:
    """What :func:`replicate` found."""

    analysis: Analysis
    differences: list[Difference]
    compared: dict[str, int]
    recorded_versions: dict
    versions: dict
    tolerance: float
    reference: str
    study: str

    @property
    def identical(self) -> bool:
        return not self.differences

    def version_changes(self) -> list[str]:
        """Libraries whose version differs between the record and this run ("numpy 1.26.4 -> 2.1.0")."""
        return [f"{k} {self.recorded_versions[k]} -> {v}" for k, v in self.versions.items()
                if k in self.recorded_versions and self.recorded_versions[k] != v]


def replicate(path: str | Path, *, into: str | None = None, against: str | None = None, tolerance: float = 0.0,
              data_dir: str | Path | None = None, limit: int = 10, skip_report: bool = False,
              say: Say = _quiet) -> Replication:
    """Replay an analysis file into a new study and compare every stored result with the record.

    Parameters
    ----------
    path : analysis file
    into : str, optional
        A new study to replay into (kept afterwards); default a temporary one,
        removed at the end (the report, if any, is written there too).
    against : str, optional
        Compare with this study's stored results instead of the results file;
        its fits are matched to the replayed ones by their settings.
    tolerance : float
        Largest absolute difference allowed between floating-point results
        (default 0: exactly equal).  Labels and counts are always exact.
    data_dir : folder of the data files (default: the analysis file's folder).
    """
    from tracker.api import Study

    if tolerance < 0:
        raise UsageError("--tolerance must be 0 or more")
    analysis = read_analysis(path)
    files = check_data(analysis, data_dir, require_hash=True)
    expected = None if against is not None else read_results(analysis.results_path)
    if into is None:
        said = say

        def say(text: str) -> None:  # the temporary folder goes away: do not point at it
            said("report: built in the temporary folder (removed afterwards)" if text.startswith("report: ") else text)

    with tempfile.TemporaryDirectory(prefix="roletrail-replicate-") as tmp:
        location = into if into is not None else str(Path(tmp) / "replica.db")
        report_dir = Path(tmp) if into is None else (Path(into).parent if "://" not in str(into) else Path(tmp))
        with Study(location) as replica:
            fit_map = replay(analysis, replica, data_dir=data_dir, report_dir=report_dir, skip_report=skip_report,
                             files=files, say=say)
            actual = results_of(replica, fit_map)
            if against is not None:
                with Study(against, create=False) as reference:
                    expected = results_of(reference, _match_fits(replica, reference, fit_map))
    names = ("recorded", "replayed") if against is None else (f"in {Path(str(against)).name}", "replayed")
    diffs, compared = compare_results(expected, actual, tolerance=tolerance, limit=limit, names=names)
    return Replication(analysis=analysis, differences=diffs, compared=compared,
                       recorded_versions=expected.get("versions", {}), versions=actual["versions"],
                       tolerance=tolerance,
                       reference=str(analysis.results_path) if against is None else str(against),
                       study=str(into) if into is not None else "a temporary study (removed)")


def _match_fits(replica, reference, fit_map: dict[int, int]) -> dict[int, int]:
    """Analysis id -> the reference study's fit with the same settings (-1 when it has none)."""
    ref = reference.fits()
    by_settings = {json.dumps(json.loads(p), sort_keys=True): int(f) for f, p in zip(ref["fit"], ref["params"])}
    out = {}
    for key, fit_id in fit_map.items():
        settings = json.dumps(replica.fit_info(fit_id)["params"], sort_keys=True)
        if settings in by_settings:
            out[key] = by_settings[settings]
    return out


def _file_hash(path: Path) -> str:
    from tracker.ingest.reader import file_hash

    return file_hash(path)


def _table(value, file: str, where: str) -> dict:
    if not isinstance(value, dict):
        raise InputError(f"{where} must be a table of settings", file=file)
    return dict(value)


def _tables(raw: dict, section: str, file: str) -> list[dict]:
    value = raw.get(section, [])
    if isinstance(value, dict):
        value = [value]
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise InputError(f"[[{section}]] must be a list of tables (write each as [[{section}]])", file=file)
    return [dict(v) for v in value]


def _required(entry: dict, key: str, kind: type, file: str, where: str):
    if key not in entry:
        raise InputError(f"{where} has no {key}", file=file, fix=f"add {key} = ...")
    value = entry.pop(key)
    if not isinstance(value, kind) or isinstance(value, bool) and kind is not bool:
        raise InputError(f"{where}: {key} must be {'text' if kind is str else 'a whole number'}", file=file, value=value)
    return value


def _no_more(entry: dict, file: str, where: str) -> None:
    if entry:
        raise InputError(f"{where} has an unknown key {next(iter(entry))!r}", file=file)


def _toml_table(name: str, table: dict, *, array: bool = False) -> str:
    """One table as TOML: a ``[name]`` (or ``[[name]]``) header, its values, then its sub-tables.

    Written section by section (tomli-w renders the values) so that every
    entry has its own header; tomli-w alone would inline short tables, and an
    inline array after a table header would belong to that table.
    """
    import re

    import tomli_w

    values = {k: v for k, v in table.items() if not isinstance(v, dict)}
    text = (f"[[{name}]]\n" if array else f"[{name}]\n") + tomli_w.dumps(values)
    for key, sub in table.items():
        if isinstance(sub, dict):
            bare = key if re.fullmatch(r"[A-Za-z0-9_-]+", key) else json.dumps(key)
            text += "\n" + _toml_table(f"{name}.{bare}", sub)
    return text


_FIRST_SETTINGS = ("method", "positions", "criterion", "seed", "smoothing")


def _ordered(mapping: dict, first: tuple[str, ...]) -> dict:
    """The keys in ``first`` first (in that order), then the others alphabetically; nested tables last."""
    head = [k for k in first if k in mapping]
    rest = sorted(k for k in mapping if k not in head)
    return {k: mapping[k] for k in head + [k for k in rest if not isinstance(mapping[k], dict)]
            + [k for k in rest if isinstance(mapping[k], dict)]}


def _drop_none(mapping: dict) -> dict:
    return {k: (_drop_none(v) if isinstance(v, dict) else v) for k, v in mapping.items()
            if v is not None and v != {}}
