"""One self-contained HTML report that works with no network.

The page carries everything it needs: the Vega, Vega-Lite and vega-embed
JavaScript (bundled by vl-convert), the chart specifications with their data,
the style sheet and a few lines of script that sort the tables. A
Content-Security-Policy in the page forbids loading anything from anywhere, so
a copy opened on an offline laptop shows exactly what was sent.

Every label is data: HTML text is escaped with :func:`html.escape`, and the JSON
of the charts is written with ``<``, ``>`` and ``&`` as ``\\u003c``, ``\\u003e``
and ``\\u0026``, so that no label (say ``</script>``) can end a script element
or become markup.
"""

from __future__ import annotations

import functools
import html
import json
import math
from collections.abc import Mapping, Sequence

import pandas as pd

from tracker.report.anonymise import anonymise_tables, anonymise_text
from tracker.report.charts import make_chart, track_label, track_names_from, vegalite_version
from tracker.report.narrative import (
    LOW_CONFIDENCE,
    describe_changes,
    is_low_confidence,
    moves_from_memberships,
)

__all__ = ["CAUTIONS", "MOVES_LIMIT", "build_report", "javascript_bundle", "script_json"]

#: Most rows of the moves table (more would make the page tens of megabytes).
MOVES_LIMIT = 2000

#: What a reader must keep in mind (shown in every report).
CAUTIONS = (
    "A position sums up the ties that were seen. It does not tell you why actors "
    "tie to whom, how loyal they are, or how good their work is.",
    "Event records hold what somebody reported and coded, which is rarely all that "
    "happened. A missing tie can be a missing report.",
    "When a period holds few events, one event more or less can move an actor. Treat "
    "moves marked as low confidence as possible noise and check them before you cite them.",
    "Partnership surveys are often given in confidence. Outside the team, share only the "
    "anonymised version of this report, in which actors appear as codes.",
    "Do not decide on funding, membership or policy from this report alone. People who "
    "know the field should review the findings first; the report is there to support that "
    "review, not to replace it.",
)

# Parameters shown first in the method table, with their display names.
_METHOD_KEYS = (
    ("method", "Method"),
    ("positions", "Positions"),
    ("criterion", "Image criterion"),
    ("alpha", "Alpha (density cut-off)"),
    ("cut", "Cut for valued ties"),
    ("seed", "Random seed"),
    ("version", "roletrail version"),
    ("software_version", "roletrail version"),
    ("created", "Created"),
)
_NOT_IN_METHOD = {"study", "study_name", "name", "counts", "relations", "structure_sentences",
                  "low_confidence", "calibration"}

_CSP = (
    "default-src 'none'; script-src 'unsafe-inline' 'unsafe-eval'; "
    "style-src 'unsafe-inline'; img-src data: blob:; font-src data:; "
    "connect-src 'none'; base-uri 'none'; form-action 'none'"
)


def build_report(
    tables: Mapping[str, object],
    periods: Sequence[object],
    meta: Mapping[str, object],
    *,
    anonymise: bool = False,
    low_confidence: float | None = None,
) -> str:
    """Return the whole report as one HTML string.

    Parameters
    ----------
    tables : mapping
        The tidy tables of :mod:`tracker.api` by name: ``summary``,
        ``memberships``, ``blocks``, ``moves``, ``transitions``, ``tracks``,
        ``structures``, ``diagnostics``, ``permutation``; any may be missing.
        ``structure_sentences`` (a list of str) may be passed here or in ``meta``.
    periods : sequence
        Period labels in time order (the order of every chart and table).
    meta : mapping
        Study name (``study``), method parameters (``method``, ``criterion``,
        ``alpha``, ``cut``, ``seed``, ``positions``), ``version``, ``created``,
        ``relations`` and ``counts``; every other key is listed too.
    anonymise : bool, default False
        Replace actor labels by stable codes (A001, ...) everywhere, charts
        included (see :func:`tracker.report.anonymise.anonymise_tables`).
    low_confidence : float, optional
        Moves below this confidence are marked (default ``meta["low_confidence"]``
        or :data:`tracker.report.narrative.LOW_CONFIDENCE`).

    Returns
    -------
    str
        A complete HTML document with no external reference.
    """
    periods = [str(p) for p in periods]
    meta = dict(meta)
    threshold = float(
        low_confidence if low_confidence is not None else meta.get("low_confidence", LOW_CONFIDENCE)
    )
    tables = dict(tables)
    sentences = _sentence_list(tables.pop("structure_sentences", None))
    sentences += _sentence_list(meta.get("structure_sentences"))
    if anonymise:
        tables, codes = anonymise_tables(tables)
        sentences = [anonymise_text(s, codes) for s in sentences]
        meta = {k: anonymise_text(v, codes) if isinstance(v, str) else v for k, v in meta.items()}
    frames = {k: v for k, v in tables.items() if isinstance(v, pd.DataFrame)}
    names = track_names_from(frames.get("tracks"))
    study = str(meta.get("study") or meta.get("study_name") or meta.get("name") or "Study")

    charts = _chart_specs(frames, periods, meta)
    body = [
        f"<header><h1>{_e(study)}</h1>",
        f"<p class=\"sub\">Positions over time, {_e(periods[0]) if periods else ''}"
        f"{' to ' + _e(periods[-1]) if len(periods) > 1 else ''}. "
        f"Made with roletrail {_e(_version(meta))}"
        f"{', ' + _e(meta['created']) if meta.get('created') else ''}.</p>",
        _anonymised_note(anonymise),
        _contents(charts),
        "</header>",
        _data_section(frames, periods, meta),
        _method_section(meta),
        _changes_section(frames, periods, sentences, threshold),
        _cautions_section(),
        _charts_section(charts),
        _moves_section(_moves(frames, periods), periods, names, threshold),
        _tracks_section(frames.get("tracks"), names),
        _glossary_section(),
        f"<footer>Report made with roletrail {_e(_version(meta))}. "
        "It needs no network: the chart software is inside this file.</footer>",
    ]
    specs = {chart_id: spec for chart_id, _, _, spec in charts}
    return _PAGE.format(
        csp=_CSP,
        title=_e(study + " - roletrail report"),
        style=_STYLE,
        body="\n".join(part for part in body if part),
        specs=script_json(specs),
        bundle=javascript_bundle() if charts else "",
        script=_SCRIPT,
    )


# --------------------------------------------------------------------------- sections


def _anonymised_note(anonymise: bool) -> str:
    if not anonymise:
        return ""
    return ("<p class=\"note\">Actor labels in this report are replaced by codes "
            "(A001, A002, ...). The key is not part of the report.</p>")


def _contents(charts: list[tuple[str, str, str, dict]]) -> str:
    links = [("data", "The data"), ("method", "Method and parameters"),
             ("changes", "What changed"), ("cautions", "Read with care")]
    links += [(chart_id, title) for chart_id, title, _, _ in charts]
    links += [("moves", "Moves"), ("tracks", "Tracks"), ("glossary", "Words used in this report")]
    items = "".join(f"<li><a href=\"#{i}\">{_e(t)}</a></li>" for i, t in links)
    return f"<nav aria-label=\"Contents\"><ol>{items}</ol></nav>"


def _data_section(frames: Mapping[str, pd.DataFrame], periods: list[str], meta: Mapping) -> str:
    out = ["<section id=\"data\"><h2>The data</h2>"]
    facts = []
    memberships = frames.get("memberships")
    if memberships is not None and len(memberships):
        facts.append(("Actors", memberships["actor"].astype(str).nunique()))
    facts.append(("Periods", f"{len(periods)}" + (f" ({periods[0]} to {periods[-1]})"
                                                  if periods else "")))
    relations = meta.get("relations")
    if relations:
        facts.append(("Relations", _value(relations)))
    counts = meta.get("counts")
    if isinstance(counts, Mapping):
        for key, value in counts.items():
            title = str(key).replace("_", " ").capitalize()
            if title not in {t for t, _ in facts}:
                facts.append((title, value))
    out.append(_facts_table(facts))
    summary = frames.get("summary")
    if summary is not None and len(summary):
        cols = [c for c in ("period", "relation", "actors", "ties", "density", "reciprocity",
                            "isolates", "mean_value") if c in summary]
        titles = {"period": "Period", "relation": "Relation", "actors": "Actors", "ties": "Ties",
                  "density": "Density", "reciprocity": "Reciprocity",
                  "isolates": "No tie", "mean_value": "Mean value"}
        order = {p: i for i, p in enumerate(periods)}
        s = summary.assign(period=summary["period"].astype(str))
        s = s.assign(_order=s["period"].map(order)).sort_values(["_order"], kind="stable")
        out.append("<h3>Period by period</h3>")
        out.append(_table(s, cols, titles, numeric={"actors", "ties", "density", "reciprocity",
                                                    "isolates", "mean_value"},
                          sort_keys={"period": s["_order"]}, caption="Network per period"))
    out.append("</section>")
    return "\n".join(out)


def _method_section(meta: Mapping[str, object]) -> str:
    facts = []
    shown = set()
    for key, title in _METHOD_KEYS:
        if key in meta and key not in shown:
            if key == "software_version" and "version" in meta:
                continue
            facts.append((title, _value(meta[key], missing="not used")))
            shown.add(key)
    for key in sorted(k for k in meta if k not in shown and k not in _NOT_IN_METHOD):
        facts.append((str(key).replace("_", " ").capitalize(), _value(meta[key], missing="none")))
    text = ("<p>Positions were found in each period with the method below, then aligned "
            "across periods into tracks. Re-running with the same data and the same "
            "parameters, seed included, gives the same report.</p>")
    return (f"<section id=\"method\"><h2>Method and parameters</h2>{text}"
            f"{_facts_table(facts)}</section>")


def _changes_section(
    frames: Mapping[str, pd.DataFrame], periods: list[str], structure: list[str], threshold: float
) -> str:
    sentences = describe_changes(frames, periods, low_confidence=threshold)
    out = ["<section id=\"changes\"><h2>What changed</h2>"]
    if sentences:
        out.append("<ul class=\"story\">" + "".join(f"<li>{_e(s)}</li>" for s in sentences)
                   + "</ul>")
    else:
        out.append("<p>There is nothing to describe yet.</p>")
    if structure:
        out.append("<h3>Overall structure</h3><ul class=\"story\">"
                   + "".join(f"<li>{_e(s)}</li>" for s in structure) + "</ul>")
    out.append("</section>")
    return "\n".join(out)


def _cautions_section() -> str:
    items = "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS)
    return (f"<section id=\"cautions\" class=\"cautions\"><h2>Read with care</h2>"
            f"<ul>{items}</ul></section>")


def _charts_section(charts: list[tuple[str, str, str, dict]]) -> str:
    if not charts:
        return ""
    out = ["<section id=\"charts\"><h2>Charts</h2>",
           "<noscript><p class=\"note\">The charts need JavaScript; the tables work "
           "without it.</p></noscript>"]
    for chart_id, title, caption, _ in charts:
        out.append(
            f"<figure><h3 id=\"{chart_id}\">{_e(title)}</h3>"
            f"<div class=\"chart\" id=\"{chart_id}-view\" role=\"img\" "
            f"aria-label=\"{_e(title)}\"></div>"
            f"<figcaption>{_e(caption)}</figcaption></figure>"
        )
    out.append("</section>")
    return "\n".join(out)


def _moves_section(
    moves: pd.DataFrame | None, periods: list[str], names: Mapping[int, str], threshold: float
) -> str:
    out = ["<section id=\"moves\"><h2>Moves</h2>"]
    if moves is None or len(moves) == 0:
        out.append("<p>No actor changed track.</p></section>")
        return "\n".join(out)
    out.append(
        f"<p>Every change of track between two periods. Click a column heading to sort. "
        f"Rows marked <span class=\"flag\">&#9676; low</span> have a confidence below "
        f"{threshold:g}: they are kept, but may be noise.</p>"
    )
    order = {p: i for i, p in enumerate(periods)}
    head = [("Actor", "text"), ("From period", "number"), ("To period", "number"),
            ("From track", "number"), ("To track", "number"), ("Confidence", "number")]
    rows = []
    frame = moves.assign(_k=moves["to_period"].astype(str).map(order))
    if len(frame) > MOVES_LIMIT:
        # A page of rows, not hundreds of thousands: the surest moves first.
        sure = pd.to_numeric(frame["confidence"], errors="coerce").fillna(-1.0)
        frame = frame.assign(_sure=-sure).sort_values(["_sure", "_k", "actor"], kind="stable").head(MOVES_LIMIT)
        out.append(f"<p class=\"note\">The table lists {MOVES_LIMIT:,} of the {len(moves):,} moves: those of "
                   "highest confidence (then the earliest). <code>roletrail export moves</code> writes them "
                   "all.</p>")
    frame = frame.sort_values(["_k", "actor"], kind="stable")
    for rec in frame.to_dict("records"):
        conf = rec.get("confidence")
        low = is_low_confidence(conf, threshold)
        conf_text = "" if _missing(conf) else f"{float(conf):.2f}"
        conf_sort = -1.0 if _missing(conf) else float(conf)
        flag = " <span class=\"flag\">&#9676; low</span>" if low else ""
        fp, tp = str(rec["from_period"]), str(rec["to_period"])
        cells = [
            f"<td>{_e(rec['actor'])}</td>",
            f"<td data-sort=\"{order.get(fp, -1)}\">{_e(fp)}</td>",
            f"<td data-sort=\"{order.get(tp, -1)}\">{_e(tp)}</td>",
            _track_cell(rec.get("from_track"), names),
            _track_cell(rec.get("to_track"), names),
            f"<td data-sort=\"{conf_sort}\">{conf_text}{flag}</td>",
        ]
        row_class = ' class="low"' if low else ""
        rows.append(f"<tr{row_class}>{''.join(cells)}</tr>")
    out.append(_sortable(head, rows, "Moves between tracks with their confidence"))
    out.append("</section>")
    return "\n".join(out)


def _tracks_section(tracks: pd.DataFrame | None, names: Mapping[int, str]) -> str:
    if tracks is None or len(tracks) == 0:
        return ""
    cols = [c for c in tracks.columns if c != "track"]
    head = [("Track", "number")] + [(str(c).replace("_", " ").capitalize(), "text") for c in cols]
    rows = []
    for rec in tracks.to_dict("records"):
        cells = [_track_cell(rec["track"], names)]
        cells += [f"<td>{_e(_value(rec[c], missing=''))}</td>" for c in cols]
        rows.append(f"<tr>{''.join(cells)}</tr>")
    return ("<section id=\"tracks\"><h2>Tracks</h2><p>A track follows one position across "
            "periods after alignment; track 0 holds actors with no tie in a period.</p>"
            + _sortable(head, rows, "Tracks") + "</section>")


def _glossary_section() -> str:
    """The glossary (:mod:`tracker.glossary`, the same text as ``roletrail explain``): plain words, formula, sources."""
    from tracker.glossary import GLOSSARY, terms

    items = []
    for term in terms():
        entry = GLOSSARY[term]
        anchor = "term-" + "-".join(term.split())
        formula = f"<p class=\"formula\">{_e(entry.formula)}</p>" if entry.formula else ""
        sources = "; ".join(_e(s) for s in entry.sources)
        items.append(f"<h3 id=\"{anchor}\">{_e(term)}</h3><p>{_e(entry.plain)}</p>{formula}"
                     f"<p class=\"note\">Source: {sources}.</p>")
    return ("<section id=\"glossary\"><h2>Words used in this report</h2><p>The same explanations are printed by "
            "<span class=\"formula\">roletrail explain TERM</span>.</p>" + "".join(items) + "</section>")


# --------------------------------------------------------------------------- charts


def _chart_specs(
    frames: Mapping[str, pd.DataFrame], periods: list[str], meta: Mapping[str, object]
) -> list[tuple[str, str, str, dict]]:
    """(element id, title, caption, Vega-Lite spec) of each chart that has data."""
    criterion = _value(meta.get("criterion"), missing="chosen")
    plan = [
        ("chart-measures", "measures", {}, "The network over time",
         "How many actors were present, how many ties they had, the density (the share of "
         "possible ties that are present) and the share of actors with no tie, per period.",
         ("summary",)),
        ("chart-flow", "flow", {}, "Flows between tracks",
         "Each bar is a period, cut into tracks by the number of actors in each. Bands join an "
         "actor's track in one period to the next: strong bands are actors who changed track, "
         "faint ones stayed. Point at a band to see who.", ("memberships",)),
        ("chart-timeline", "timeline", {}, "Every actor over time",
         "One row per actor, one column per period; the colour is the track. Faded cells are "
         "memberships of low confidence; empty cells are periods in which the actor was absent.",
         ("memberships",)),
        ("chart-trajectory", "trajectory", {}, "One actor's path",
         "Choose an actor in the list under the chart. Bigger points are surer memberships; "
         "diamonds are periods in which the actor had no tie.", ("memberships",)),
        ("chart-matrix-density", "matrix", {"value": "density"}, "Block densities",
         "For each period, the density of ties sent by the positions in the rows to the "
         "positions in the columns (the share of possible ties that are present); positions "
         "are labelled by their track and ordered by it.", ("blocks",)),
        ("chart-matrix-image", "matrix", {"value": "image"}, "Image matrices",
         f"The same blocks reduced to 0 or 1 under the {criterion} criterion: dark blocks count "
         "as ties between positions, light ones as none.", ("blocks",)),
        ("chart-block-density", "block-density", {}, "Density between tracks over time",
         "One panel per sending track; each line is a receiving track.", ("blocks",)),
        ("chart-structure", "structure", {}, "Ideal images",
         "How closely each period's blocks match the closest ideal pattern; outlined cells are "
         "clear structures: the ideal fits better than its blocks rearranged at random and the "
         "positions are clearer than in random networks (q below 0.05).", ("structures",)),
        ("chart-fit", "fit", {}, "Goodness of fit",
         "Left: fit for each number of positions tried (large points: the number chosen). "
         "Right: the fit test, the share of networks drawn without positions (same number of "
         "ties) where the same method fits at least as well; below the dashed line (0.05) the "
         "positions are unlikely to be chance.",
         ("diagnostics", "permutation")),
        ("chart-calibration", "calibration", {}, "Is move confidence a probability?",
         _calibration_sentence(meta.get("calibration")), ("calibration",)),
    ]
    out = []
    for chart_id, name, options, title, caption, needs in plan:
        if not any(frames.get(t) is not None and len(frames[t]) for t in needs):
            continue
        spec = make_chart(name, frames, periods, **options).to_dict()
        # The schema address is only a version tag; the page states the mode
        # instead, so that the file holds no web address it does not need.
        spec.pop("$schema", None)
        out.append((chart_id, title, caption, spec))
    return out


def _calibration_sentence(check) -> str:
    """A plain sentence on the latest calibration check (or nothing to say)."""
    if not isinstance(check, Mapping):
        return ""
    ece = check.get("ece")
    text = (f"Studies like this one were simulated {check.get('studies')} times from the fitted model, "
            "refitted the same way, and their moves, whose truth is known, were scored. Each point is a "
            "group of moves: across, the confidence they were given; up, how many of them were real. "
            "On the dashed line, a confidence of 0.7 means 7 such moves in 10 are real.")
    if ece is not None:
        floor = check.get("ece_floor_95")
        noise = floor is not None and ece <= floor
        text += (f" The average gap (expected calibration error) is {ece:.2f}"
                 + (f"; on {check.get('moves')} moves a perfectly calibrated confidence would show up to "
                    f"{floor:.2f} by chance" if floor is not None else "")
                 + (": the confidence can be read as a probability." if ece <= 0.05 or noise else
                    ": read the confidence as a rough guide, not an exact probability."))
    return text


@functools.lru_cache(maxsize=2)
def javascript_bundle(vl_version: str | None = None) -> str:
    """Vega, Vega-Lite and vega-embed as one script (from vl-convert), cached.

    Bundling takes seconds (vl-convert runs a JavaScript bundler), the same
    for every report, so the text is also kept on disk, one file per
    vl-convert and Vega-Lite version, in ``$ROLETRAIL_CACHE`` or the user's
    cache folder (``$XDG_CACHE_HOME/roletrail``, else ``~/.cache/roletrail``);
    where that cannot be written it is bundled every time.  The text is checked
    so it cannot close its ``<script>`` element early.
    """
    import vl_convert as vlc

    version = vl_version or vegalite_version()
    cached = _bundle_cache_file(getattr(vlc, "__version__", "unknown"), version)
    try:
        bundle = cached.read_text(encoding="utf-8")
    except OSError:
        bundle = vlc.javascript_bundle(vl_version=version)
        _write_quietly(cached, bundle)
    # "</script" or "<!--" inside a script element would end or confuse it.
    return bundle.replace("</script", "<\\/script").replace("<!--", "<\\!--")


def _bundle_cache_file(vlc_version: str, vl_version: str | None):
    import os
    from pathlib import Path

    root = os.environ.get("ROLETRAIL_CACHE") or os.path.join(
        os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache"), "roletrail")
    safe = "".join(c if c.isalnum() or c in "._-" else "_" for c in f"{vlc_version}-{vl_version}")
    return Path(root) / f"vega-bundle-{safe}.js"


def _write_quietly(path, text: str) -> None:
    """Write ``text`` to ``path`` atomically (a temporary file, then a rename); give up silently."""
    import os
    import tempfile

    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".bundle-")
        with os.fdopen(fd, "w", encoding="utf-8") as handle:
            handle.write(text)
        os.replace(tmp, path)
    except OSError:
        pass


def script_json(value: object) -> str:
    """JSON that is safe inside an HTML ``<script>`` element.

    ``<``, ``>`` and ``&`` are written as JSON escapes, so no string in the data
    can close the element or open a comment; the JSON value is unchanged.

    >>> script_json({"a": "</script>"})
    '{"a": "\\\\u003c/script\\\\u003e"}'
    """
    text = json.dumps(value, ensure_ascii=True, allow_nan=False, default=_json_default)
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


# --------------------------------------------------------------------------- helpers


def _moves(frames: Mapping[str, pd.DataFrame], periods: list[str]) -> pd.DataFrame | None:
    moves = frames.get("moves")
    if moves is None and frames.get("memberships") is not None:
        moves = moves_from_memberships(frames["memberships"], periods)
    return moves


def _sentence_list(value: object) -> list[str]:
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    if isinstance(value, pd.DataFrame):
        column = "sentence" if "sentence" in value else value.columns[0]
        return [str(v) for v in value[column] if not _missing(v)]
    return [str(v) for v in value if not _missing(v)]  # type: ignore[union-attr]


def _facts_table(facts: list[tuple[str, object]]) -> str:
    rows = "".join(f"<tr><th scope=\"row\">{_e(k)}</th><td>{_e(v)}</td></tr>" for k, v in facts)
    return f"<table class=\"facts\"><tbody>{rows}</tbody></table>"


def _table(frame: pd.DataFrame, cols: list[str], titles: Mapping[str, str], *,
           numeric: set[str], sort_keys: Mapping[str, pd.Series], caption: str) -> str:
    head = [(titles.get(c, c), "number" if c in numeric or c in sort_keys else "text")
            for c in cols]
    rows = []
    for idx, rec in zip(frame.index, frame.to_dict("records")):
        cells = []
        for c in cols:
            value = rec[c]
            text = _number(value) if c in numeric else _value(value, missing="")
            key = sort_keys[c].loc[idx] if c in sort_keys else None
            attr = f" data-sort=\"{_e(key)}\"" if key is not None else ""
            cells.append(f"<td{attr}>{_e(text)}</td>")
        rows.append(f"<tr>{''.join(cells)}</tr>")
    return _sortable(head, rows, caption)


def _sortable(head: list[tuple[str, str]], rows: list[str], caption: str) -> str:
    ths = "".join(
        f"<th scope=\"col\" data-type=\"{kind}\"><button type=\"button\">{_e(title)}</button></th>"
        for title, kind in head
    )
    return (f"<div class=\"scroll\"><table class=\"sortable\"><caption>{_e(caption)}</caption>"
            f"<thead><tr>{ths}</tr></thead><tbody>{''.join(rows)}</tbody></table></div>")


def _track_cell(track: object, names: Mapping[int, str]) -> str:
    if _missing(track):
        return "<td data-sort=\"-1\"></td>"
    number = int(track)  # type: ignore[arg-type]
    label = track_label(number, names)
    shown = label if label in (f"T{number}",) else f"{label} (T{number})"
    return f"<td data-sort=\"{number}\">{_e(shown)}</td>"


def _value(value: object, *, missing: str = "") -> str:
    if _missing(value):
        return missing
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_value(v) for v in value)
    if isinstance(value, Mapping):
        return "; ".join(f"{k}: {_value(v)}" for k, v in value.items())
    return str(value)


def _number(value: object) -> str:
    if _missing(value):
        return ""
    if isinstance(value, float) and not float(value).is_integer():
        return f"{value:.3f}"
    try:
        return f"{int(value):d}"  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return str(value)


def _version(meta: Mapping[str, object]) -> str:
    value = meta.get("version") or meta.get("software_version")
    if value:
        return str(value)
    from tracker import __version__

    return __version__


def _e(value: object) -> str:
    return html.escape("" if value is None else str(value), quote=True)


def _missing(value: object) -> bool:
    if value is None:
        return True
    if isinstance(value, float) and math.isnan(value):
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _json_default(value: object) -> object:
    if hasattr(value, "item"):
        return value.item()  # numpy scalars
    if hasattr(value, "isoformat"):
        return value.isoformat()
    raise TypeError(f"cannot write {type(value).__name__} into the report")


_STYLE = """
:root { --ink: #1f2328; --muted: #6e7781; --line: #d0d7de; --accent: #0072b2; --warn: #9a6700; }
* { box-sizing: border-box; }
body { font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; color: var(--ink);
       margin: 0 auto; max-width: 1280px; padding: 1.5rem 2rem 4rem; }
h1 { margin: 0 0 .2rem; font-size: 1.8rem; }
h2 { border-bottom: 1px solid var(--line); padding-bottom: .3rem; margin-top: 2.5rem; }
.sub, figcaption, caption, .note { color: var(--muted); }
caption { text-align: left; padding: .3rem 0; font-size: .9rem; }
nav ol { columns: 3; padding-left: 1.2rem; margin: .8rem 0; }
nav a, a { color: var(--accent); }
table { border-collapse: collapse; margin: .5rem 0 1rem; font-size: .9rem; }
th, td { border-bottom: 1px solid var(--line); padding: .25rem .7rem; text-align: left;
         vertical-align: top; }
table.facts th { font-weight: 600; white-space: nowrap; }
table.sortable th button { all: unset; cursor: pointer; font-weight: 600; }
table.sortable th button:focus-visible { outline: 2px solid var(--accent); }
table.sortable th[aria-sort="ascending"] button::after { content: " \\25B2"; }
table.sortable th[aria-sort="descending"] button::after { content: " \\25BC"; }
.scroll { display: inline-block; max-width: 100%; max-height: 32rem; overflow: auto; }
tr.low td { color: var(--muted); font-style: italic; }
.flag { color: var(--warn); font-style: normal; font-size: .8rem; white-space: nowrap; }
.cautions { background: #fff8c5; border-left: 4px solid #d4a72c; padding: .2rem 1.2rem .6rem; }
.cautions h2 { border: none; margin-top: .8rem; }
ul.story li { margin: .25rem 0; }
#glossary h3 { margin-bottom: .2rem; }
.formula { font-family: ui-monospace, "SFMono-Regular", Menlo, Consolas, monospace; font-size: .9rem; }
figure { margin: 1.5rem 0 2.5rem; }
.chart { overflow-x: auto; max-width: 100%; }
footer { margin-top: 3rem; color: var(--muted); font-size: .85rem; }
@media print { nav, .vega-actions, details { display: none; } .scroll { max-height: none; } }
"""

_SCRIPT = """
(function () {
  "use strict";
  document.querySelectorAll("table.sortable").forEach(function (table) {
    var heads = table.querySelectorAll("thead th");
    heads.forEach(function (th, col) {
      var button = th.querySelector("button");
      button.addEventListener("click", function () {
        var ascending = th.getAttribute("aria-sort") !== "ascending";
        heads.forEach(function (h) { h.removeAttribute("aria-sort"); });
        th.setAttribute("aria-sort", ascending ? "ascending" : "descending");
        var numeric = th.getAttribute("data-type") === "number";
        var body = table.tBodies[0];
        var rows = Array.prototype.slice.call(body.rows);
        var key = function (row) {
          var cell = row.cells[col];
          var value = cell.hasAttribute("data-sort") ? cell.getAttribute("data-sort")
                                                     : cell.textContent;
          if (!numeric) { return value.toLowerCase(); }
          var number = parseFloat(value);
          return isNaN(number) ? -Infinity : number;
        };
        rows.sort(function (a, b) {
          var x = key(a), y = key(b);
          return (x < y ? -1 : x > y ? 1 : 0) * (ascending ? 1 : -1);
        });
        rows.forEach(function (row) { body.appendChild(row); });
      });
    });
  });
  if (typeof vegaEmbed !== "function") { return; }
  var specs = JSON.parse(document.getElementById("chart-specs").textContent);
  Object.keys(specs).forEach(function (id) {
    var target = document.getElementById(id + "-view");
    vegaEmbed(target, specs[id], {
      renderer: "svg",
      mode: "vega-lite",
      actions: {export: true, source: false, compiled: false, editor: false}
    }).catch(function (error) {
      target.textContent = "This chart could not be drawn: " + error;
    });
  });
})();
"""

_PAGE = """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="{csp}">
<meta name="viewport" content="width=device-width, initial-scale=1">
<meta name="referrer" content="no-referrer">
<title>{title}</title>
<style>{style}</style>
</head>
<body>
{body}
<script type="application/json" id="chart-specs">{specs}</script>
<script>{bundle}</script>
<script>{script}</script>
</body>
</html>
"""
