"""Altair charts of positions over time, one function per view.

Every function takes the tidy DataFrames of :mod:`tracker.api` (and the ordered
list of period labels) and returns an :class:`altair.TopLevelMixin` chart, so a
notebook user gets exactly the pictures of the HTML report. Labels are data:
they travel inside the Vega-Lite data and are never spliced into expressions.

Data are embedded inline as ``{"values": [...]}`` rather than handed to
altair's data transformer, so the charts carry their data with them (a report
must work offline) and altair's row limit does not apply; the global transformer
settings of the caller are left alone.

Colours follow tracks, not positions: track ``t`` has the same colour in every
chart (the "no tie" track 0 is grey), so a reader can follow one track from the
flow chart to the block densities.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

import altair as alt
import numpy as np
import pandas as pd

from tracker.errors import UsageError

__all__ = [
    "ACTOR_CELLS",
    "ACTOR_FLOOR",
    "ACTOR_LIMIT",
    "CHARTS",
    "CHART_INPUTS",
    "NO_TIE_LABEL",
    "TRACK_COLOURS",
    "block_density_chart",
    "busiest_actors",
    "fit_chart",
    "flow_chart",
    "make_chart",
    "matrix_chart",
    "network_measures_chart",
    "save_chart",
    "structure_chart",
    "timeline_chart",
    "track_label",
    "track_names_from",
    "trajectory_chart",
    "vegalite_version",
]

#: Label of track 0, the actors present in a period but without any tie in it.
NO_TIE_LABEL = "no tie"

#: Colour of track 0.
NO_TIE_COLOUR = "#b3b3b3"

#: Colours of tracks 1, 2, ... (cycled). A colour-blind-safe set first (the
#: Okabe-Ito colours, minus yellow and black), then darker and lighter tones.
TRACK_COLOURS = (
    "#0072b2",
    "#e69f00",
    "#009e73",
    "#cc79a7",
    "#d55e00",
    "#56b4e9",
    "#7a5195",
    "#8c6d31",
    "#2f4b7c",
    "#a05195",
    "#3d8b37",
    "#b24745",
)

#: Significance level drawn on permutation-test charts (common practice).
SIGNIFICANCE = 0.05

_BAR_WIDTH = 0.22  # of the gap between two periods, in the flow chart
_BAND_STEPS = 17  # points along each flow band (smooth S-curve)


# --------------------------------------------------------------------------- tracks


def track_label(track: object, names: Mapping[int, str] | None = None) -> str:
    """Display label of a track: its name if it has one, else ``T<number>``.

    Track 0 is the track of actors with no tie in the period.

    >>> track_label(0), track_label(3), track_label(3, {3: "coordination"})
    ('no tie', 'T3', 'coordination')
    """
    if _missing(track):
        return "?"
    number = int(track)
    if names and number in names and not _missing(names[number]) and str(names[number]):
        return str(names[number])
    return NO_TIE_LABEL if number == 0 else f"T{number}"


def _track_labels(tracks: pd.Series, names: Mapping[int, str] | None) -> pd.Series:
    """:func:`track_label` of every entry, computed once per distinct track."""
    labels = {t: track_label(t, names) for t in pd.unique(tracks)}
    return tracks.map(labels)


def track_names_from(tracks: pd.DataFrame | None) -> dict[int, str]:
    """``{track: name}`` from the ``tracks`` table (empty when there is none)."""
    if tracks is None or len(tracks) == 0 or "track" not in tracks or "name" not in tracks:
        return {}
    names = {}
    for track, name in zip(tracks["track"], tracks["name"]):
        if not _missing(track) and not _missing(name) and str(name):
            names[int(track)] = str(name)
    return names


def _track_colour(track: int) -> str:
    return NO_TIE_COLOUR if track == 0 else TRACK_COLOURS[(track - 1) % len(TRACK_COLOURS)]


def _distinct_tracks(tracks: Sequence[int]) -> list[int]:
    """The distinct tracks in ascending order (a set first: one entry per membership would be slow)."""
    return sorted({int(t) for t in set(tracks) if not _missing(t)})


def _track_scale(tracks: Sequence[int], names: Mapping[int, str] | None) -> alt.Scale:
    ordered = _distinct_tracks(tracks)
    labels = [track_label(t, names) for t in ordered]
    # Two tracks could share a display name; Vega-Lite needs one colour per label.
    seen: dict[str, str] = {}
    for label, track in zip(labels, ordered):
        seen.setdefault(label, _track_colour(track))
    return alt.Scale(domain=list(seen), range=list(seen.values()))


def _track_sort(tracks: Sequence[int], names: Mapping[int, str] | None) -> list[str]:
    ordered = _distinct_tracks(tracks)
    return list(dict.fromkeys(track_label(t, names) for t in ordered))


# --------------------------------------------------------------------------- charts


def flow_chart(
    memberships: pd.DataFrame,
    periods: Sequence[object],
    *,
    track_names: Mapping[int, str] | None = None,
    width_per_period: int = 80,
    height: int = 360,
) -> alt.LayerChart:
    """Alluvial chart: actors flowing between tracks from one period to the next.

    Each period is a stacked bar with one segment per track (height = number of
    actors in it). Between two consecutive periods a band joins track ``a`` to
    track ``b`` whose width is the number of actors in ``a`` then and in ``b``
    next; bands of actors who changed track are drawn strong, bands of actors
    who stayed are faint. Actors absent from either period (entry, exit) have
    no band.

    Parameters
    ----------
    memberships : DataFrame
        Columns ``period``, ``actor``, ``track``.
    periods : sequence
        Period labels in time order.
    track_names : mapping, optional
        ``{track: name}`` (see :func:`track_names_from`).

    Returns
    -------
    altair.LayerChart
    """
    periods = _periods(periods)
    if memberships is None or len(memberships) == 0:
        return _empty_chart("No memberships to draw.")
    m = _with_period_index(memberships[["period", "actor", "track"]], periods)
    m["track"] = m["track"].astype(int)
    m["track_label"] = _track_labels(m["track"], track_names)

    counts = m.groupby(["pidx", "track"], as_index=False).agg(n=("actor", "size"))
    counts = counts.sort_values(["pidx", "track"], kind="stable").reset_index(drop=True)
    gap = max(0.5, 0.04 * counts.groupby("pidx")["n"].sum().max())
    rank = counts.groupby("pidx").cumcount()
    counts["y0"] = counts.groupby("pidx")["n"].cumsum() - counts["n"] + gap * rank
    counts["y1"] = counts["y0"] + counts["n"]
    counts["x0"] = counts["pidx"] - _BAR_WIDTH / 2
    counts["x1"] = counts["pidx"] + _BAR_WIDTH / 2
    counts["period"] = [periods[i] for i in counts["pidx"]]
    counts["track_label"] = [track_label(t, track_names) for t in counts["track"]]
    counts["mid"] = (counts["y0"] + counts["y1"]) / 2
    top = float(counts["y1"].max())

    bands = _flow_bands(m, counts, periods, track_names)

    colour = alt.Color(
        "track_label:N",
        title="Track",
        scale=_track_scale(m["track"].tolist(), track_names),
        sort=_track_sort(m["track"].tolist(), track_names),
    )
    x_scale = alt.Scale(domain=[-0.5, len(periods) - 0.5], nice=False, zero=False)
    y_scale = alt.Scale(domain=[0, top + 2.5 * gap], nice=False)
    bars = (
        alt.Chart(_data(counts[["period", "track_label", "n", "x0", "x1", "y0", "y1"]]))
        .mark_rect(stroke="white", strokeWidth=0.5)
        .encode(
            x=alt.X("x0:Q", scale=x_scale, axis=None),
            x2="x1:Q",
            y=alt.Y("y0:Q", scale=y_scale, axis=None),
            y2="y1:Q",
            color=colour,
            tooltip=[
                alt.Tooltip("period:N", title="Period"),
                alt.Tooltip("track_label:N", title="Track"),
                alt.Tooltip("n:Q", title="Actors"),
            ],
        )
    )
    counts_text = (
        alt.Chart(_data(counts.loc[counts["n"] >= 2 * gap, ["pidx", "mid", "n"]]))
        .mark_text(fontSize=10, color="white", fontWeight="bold")
        .encode(x=alt.X("pidx:Q", scale=x_scale, axis=None),
                y=alt.Y("mid:Q", scale=y_scale, axis=None), text="n:Q")
    )
    heads = pd.DataFrame({"pidx": range(len(periods)), "period": periods, "y": top + 1.5 * gap})
    period_text = (
        alt.Chart(_data(heads))
        .mark_text(fontSize=11, baseline="bottom")
        .encode(x=alt.X("pidx:Q", scale=x_scale, axis=None),
                y=alt.Y("y:Q", scale=y_scale, axis=None), text="period:N")
    )
    layers = [bars, counts_text, period_text]
    if len(bands):
        # The names are looked up by band: on every one of a band's points (the
        # tooltip shows the point nearest the pointer) they made most of the
        # chart's size at tens of thousands of actors.
        names = bands.drop_duplicates("link")[["link", "who"]]
        band_layer = (
            alt.Chart(_data(bands.drop(columns="who")))
            .transform_lookup(lookup="link", from_=alt.LookupData(data=_data(names), key="link",
                                                                  fields=["who"]))
            .mark_area(interpolate="linear", strokeWidth=0)
            .encode(
                x=alt.X("x:Q", scale=x_scale, axis=None),
                y=alt.Y("y:Q", scale=y_scale, axis=None),
                y2="y2:Q",
                detail="link:N",
                color=colour,
                opacity=alt.Opacity(
                    "flow:O",
                    sort=["stayed", "moved"],
                    title="Flow",
                    scale=alt.Scale(domain=["stayed", "moved"], range=[0.18, 0.72]),
                ),
                tooltip=[
                    alt.Tooltip("from_period:N", title="From period"),
                    alt.Tooltip("from_label:N", title="From track"),
                    alt.Tooltip("to_period:N", title="To period"),
                    alt.Tooltip("to_label:N", title="To track"),
                    alt.Tooltip("n:Q", title="Actors"),
                    alt.Tooltip("who:N", title="Who"),
                ],
            )
        )
        layers.insert(0, band_layer)
    return alt.layer(*layers).properties(
        width=max(420, width_per_period * len(periods)),
        height=height,
        title="Actors flowing between tracks",
    )


def _flow_bands(
    m: pd.DataFrame,
    counts: pd.DataFrame,
    periods: list[str],
    names: Mapping[int, str] | None,
) -> pd.DataFrame:
    """Polygons (as area rows) of the bands between consecutive periods."""
    now = m[["pidx", "actor", "track"]]
    nxt = m[["pidx", "actor", "track"]].assign(pidx=m["pidx"] - 1)
    pairs = now.merge(nxt, on=["pidx", "actor"], suffixes=("_from", "_to"))
    if len(pairs) == 0:
        return pd.DataFrame()
    pairs = pairs.sort_values(["pidx", "track_from", "track_to", "actor"], kind="stable")
    links = pairs.groupby(["pidx", "track_from", "track_to"], as_index=False).agg(
        n=("actor", "size"), who=("actor", _who)
    )
    seg = counts.set_index(["pidx", "track"])["y0"]
    # Outgoing bands fill the source segment in order of destination track;
    # incoming bands fill the target segment in order of source track, so
    # bands cross as little as a fixed track order allows.
    links = links.sort_values(["pidx", "track_from", "track_to"], kind="stable")
    out_off = links.groupby(["pidx", "track_from"])["n"].cumsum() - links["n"]
    links["a0"] = seg.loc[list(zip(links["pidx"], links["track_from"]))].to_numpy() + out_off
    links = links.sort_values(["pidx", "track_to", "track_from"], kind="stable")
    in_off = links.groupby(["pidx", "track_to"])["n"].cumsum() - links["n"]
    links["b0"] = seg.loc[list(zip(links["pidx"] + 1, links["track_to"]))].to_numpy() + in_off
    links = links.sort_values(["pidx", "track_from", "track_to"], kind="stable").reset_index(
        drop=True
    )
    links["link"] = np.arange(len(links))

    t = np.linspace(0.0, 1.0, _BAND_STEPS)
    ease = t * t * (3.0 - 2.0 * t)  # smoothstep: flat where the band meets a bar
    rows = links.loc[links.index.repeat(_BAND_STEPS)].reset_index(drop=True)
    step = np.tile(np.arange(_BAND_STEPS), len(links))
    start = rows["pidx"] + _BAR_WIDTH / 2
    rows["x"] = start + (1.0 - _BAR_WIDTH) * t[step]
    rows["y"] = rows["a0"] + (rows["b0"] - rows["a0"]) * ease[step]
    rows["y2"] = rows["y"] + rows["n"]
    rows["flow"] = np.where(rows["track_from"] == rows["track_to"], "stayed", "moved")
    rows["track_label"] = _track_labels(rows["track_from"], names)
    rows["from_label"] = rows["track_label"]
    rows["to_label"] = _track_labels(rows["track_to"], names)
    rows["from_period"] = [periods[i] for i in rows["pidx"]]
    rows["to_period"] = [periods[i + 1] for i in rows["pidx"]]
    keep = ["link", "x", "y", "y2", "n", "flow", "track_label", "from_label", "to_label",
            "from_period", "to_period", "who"]
    return rows[keep]


def _who(actors: pd.Series, limit: int = 12) -> str:
    names = [str(a) for a in actors.iloc[:limit]]  # only those named: bands of thousands of actors
    if len(actors) <= limit:
        return ", ".join(names)
    return ", ".join(names) + f" and {len(actors) - limit} more"


def matrix_chart(
    blocks: pd.DataFrame,
    periods: Sequence[object],
    value: str = "density",
    *,
    track_names: Mapping[int, str] | None = None,
    columns: int = 4,
    cell: int = 22,
) -> alt.VConcatChart:
    """Small multiples of block matrices, one per period (and per relation).

    Rows and columns are the positions of the period, ordered by the track each
    position is aligned to, so the same track sits in the same corner from one
    period to the next. ``value="density"`` colours each block by its density
    (ties / possible ties, Wasserman & Faust 1994, sec. 10.2); ``value="image"``
    shows the 0/1 image under the fit's criterion.

    Parameters
    ----------
    blocks : DataFrame
        Columns ``period, relation, from_position, to_position, from_track,
        to_track, ties, possible, density`` and ``image``.
    periods : sequence
        Period labels in time order.
    value : {"density", "image"}
    columns : int, default 4
        Periods per row of small multiples.
    """
    if value not in ("density", "image"):
        raise UsageError(f"unknown matrix value {value!r}; use 'density' or 'image'")
    periods = _periods(periods)
    if blocks is None or len(blocks) == 0:
        return alt.vconcat(_empty_chart("No blocks to draw."))
    b = _with_period_index(blocks, periods)
    b["relation"] = b["relation"].astype(str) if "relation" in b else ""
    for side in ("from", "to"):
        track = b[f"{side}_track"].fillna(-1).astype(int)
        position = b[f"{side}_position"].astype(int)
        b[f"{side}_label"] = [
            f"{track_label(t, track_names)} \u00b7 P{p}" if t >= 0 else f"P{p}"
            for t, p in zip(track, position)
        ]
        # Sort key: track first (unaligned positions last), then position.
        b[f"{side}_key"] = np.where(track >= 0, track, 10**6) * 10**4 + position
    b["density"] = b["density"].astype(float)
    b["image"] = b["image"].fillna(0).astype(int).astype(str) if "image" in b else "0"
    # Empty blocks stay unlabelled so the eye finds the ties, not the zeros.
    b["shown"] = b["density"].round(2).where(b["density"] > 0)
    keep = ["period", "relation", "from_label", "to_label", "from_key", "to_key",
            "ties", "possible", "density", "image", "shown"]
    keep = [c for c in keep if c in b]

    if value == "density":
        colour = alt.Color(
            "density:Q",
            title="Density",
            scale=alt.Scale(domain=[0, 1], range=["#f7f7f7", "#08306b"], clamp=True),
        )
    else:
        colour = alt.Color(
            "image:N",
            title="Image",
            scale=alt.Scale(domain=["0", "1"], range=["#f2f2f2", "#2f4b7c"]),
        )
    # Fixed panel sizes: Vega-Lite cannot size wrapped facets by step when
    # each panel has its own scales.
    side = cell * max(1, int(b.groupby("period")["from_label"].nunique().max()))
    charts = []
    relations = list(dict.fromkeys(b["relation"]))
    for relation in relations:
        part = b.loc[b["relation"] == relation, keep]
        base = alt.Chart().encode(
            x=alt.X(
                "to_label:N",
                title=None,
                sort=alt.EncodingSortField("to_key", op="min"),
                axis=alt.Axis(labelAngle=-45, labelFontSize=9, labelLimit=110),
            ),
            y=alt.Y(
                "from_label:N",
                title=None,
                sort=alt.EncodingSortField("from_key", op="min"),
                # a fixed label width keeps the small multiples in line
                axis=alt.Axis(labelFontSize=9, minExtent=110, labelLimit=110),
            ),
        )
        rect = base.mark_rect(stroke="white", strokeWidth=1).encode(
            color=colour,
            tooltip=[
                alt.Tooltip("period:N", title="Period"),
                alt.Tooltip("from_label:N", title="From"),
                alt.Tooltip("to_label:N", title="To"),
                alt.Tooltip("ties:Q", title="Ties"),
                alt.Tooltip("possible:Q", title="Possible"),
                alt.Tooltip("density:Q", title="Density", format=".3f"),
                alt.Tooltip("image:N", title="Image"),
            ],
        )
        layers = [rect]
        if value == "density":
            text = base.mark_text(fontSize=8).transform_filter("isValid(datum.shown)").encode(
                text=alt.Text("shown:Q", format=".2f"),
                color=alt.condition("datum.density > 0.55", alt.value("white"), alt.value("black")),
            )
            layers.append(text)
        title = f"{relation}: block {value}" if relation else f"Block {value}"
        chart = (
            alt.layer(*layers, data=_data(part))
            .properties(width=side, height=side)
            .facet(
                facet=alt.Facet("period:N", sort=periods, title=None),
                columns=max(1, int(columns)),
            )
            .resolve_scale(x="independent", y="independent")
            .properties(title=title)
        )
        charts.append(chart)
    return alt.vconcat(*charts)


def trajectory_chart(
    memberships: pd.DataFrame,
    periods: Sequence[object],
    *,
    track_names: Mapping[int, str] | None = None,
    actor: object | None = None,
    max_actors: int | None = None,
) -> alt.LayerChart:
    """One actor's track, period by period, chosen from a drop-down in the page.

    The drop-down is a Vega-Lite parameter bound to a ``<select>``; the chart
    filters the memberships to the chosen actor, so every actor's path is in
    the one spec. Point size follows the confidence of the membership; hollow
    points mark periods in which the actor had no tie.

    Parameters
    ----------
    memberships : DataFrame
        Columns ``period, actor, position, track, isolate, confidence``.
    periods : sequence
        Period labels in time order.
    actor : optional
        The actor shown first (default: the first in sorted order).
    max_actors : int, optional
        Most actors in the drop-down (default :data:`ACTOR_LIMIT`, fewer
        above :data:`ACTOR_CELLS` actor-periods): above it,
        those who changed track most often (see :func:`busiest_actors`), plus
        ``actor``; the title says how many of how many.  Every actor's path
        would put all memberships into the page (megabytes at thousands of
        actors) behind a list too long to use.
    """
    periods = _periods(periods)
    if memberships is None or len(memberships) == 0:
        return _empty_chart("No memberships to draw.")
    m = _actor_tracks(memberships, periods, track_names)
    m, shown = _limit_actors(m, max_actors, keep=actor)
    m["no_tie"] = _isolate(m).map({True: "yes", False: "no"})
    actors = sorted(m["actor"].unique())
    first = str(actor) if actor is not None and str(actor) in actors else actors[0]
    pick = alt.param(
        name="actor_pick",
        value=first,
        bind=alt.binding_select(options=actors, name="Actor "),
    )
    cols = ["period", "actor", "position", "track_label", "certainty", "no_tie"]
    tracks = m["track"].tolist()
    x = alt.X("period:N", sort=periods, scale=alt.Scale(domain=periods), title="Period",
              axis=alt.Axis(labelAngle=-45))
    y = alt.Y(
        "track_label:N",
        title="Track",
        sort=_track_sort(tracks, track_names),
        scale=alt.Scale(domain=_track_sort(tracks, track_names)),
    )
    base = alt.Chart(_data(m[cols])).transform_filter(alt.datum.actor == pick).encode(x=x, y=y)
    line = base.mark_line(color="#777777", strokeDash=[3, 2])
    points = base.mark_point(filled=True, opacity=1).encode(
        color=alt.Color(
            "track_label:N",
            title="Track",
            scale=_track_scale(tracks, track_names),
            sort=_track_sort(tracks, track_names),
        ),
        size=alt.Size("certainty:Q", title="Confidence", scale=alt.Scale(domain=[0, 1],
                                                                          range=[30, 260])),
        shape=alt.Shape("no_tie:N", title="No tie", scale=alt.Scale(domain=["no", "yes"],
                                                                  range=["circle", "diamond"])),
        tooltip=[
            alt.Tooltip("actor:N", title="Actor"),
            alt.Tooltip("period:N", title="Period"),
            alt.Tooltip("track_label:N", title="Track"),
            alt.Tooltip("position:Q", title="Position"),
            alt.Tooltip("certainty:Q", title="Confidence", format=".2f"),
        ],
    )
    return (
        alt.layer(line, points)
        .add_params(pick)
        .properties(width=max(420, 40 * len(periods)), height=240,
                    title="One actor's track over time (choose the actor below)" + shown)
    )


def timeline_chart(
    memberships: pd.DataFrame,
    periods: Sequence[object],
    *,
    track_names: Mapping[int, str] | None = None,
    row_height: int = 13,
    max_actors: int | None = None,
) -> alt.Chart:
    """Every actor's track in every period: one row per actor, one colour per track.

    Rows are sorted by the track an actor starts in, then by label, so actors
    that start together sit together and a move shows as a change of colour
    along a row. Faded cells are memberships of low confidence; blank cells are
    periods in which the actor was absent.  Above ``max_actors`` actors
    (default :data:`ACTOR_LIMIT`, fewer above :data:`ACTOR_CELLS` cells) the
    rows are those who changed track most often (:func:`busiest_actors`), and
    the title says how many of how many: thousands of rows are neither
    readable nor small.
    """
    periods = _periods(periods)
    if memberships is None or len(memberships) == 0:
        return _empty_chart("No memberships to draw.")
    m = _actor_tracks(memberships, periods, track_names)
    m, shown = _limit_actors(m, max_actors)
    first = m.sort_values("pidx", kind="stable").groupby("actor", as_index=False).first()
    first["start"] = first["track"].where(first["track"] > 0, 10**6)
    order = first.sort_values(["start", "pidx", "actor"], kind="stable")["actor"].tolist()
    tracks = m["track"].tolist()
    cols = ["period", "actor", "position", "track_label", "certainty"]
    return (
        alt.Chart(_data(m[cols]))
        .mark_rect(stroke="white", strokeWidth=0.5)
        .encode(
            x=alt.X("period:N", sort=periods, scale=alt.Scale(domain=periods), title="Period",
                    axis=alt.Axis(orient="top", labelAngle=-45)),
            y=alt.Y("actor:N", sort=order, title=None, axis=alt.Axis(labelLimit=220)),
            color=alt.Color(
                "track_label:N",
                title="Track",
                scale=_track_scale(tracks, track_names),
                sort=_track_sort(tracks, track_names),
            ),
            opacity=alt.Opacity("certainty:Q", title="Confidence",
                                scale=alt.Scale(domain=[0, 1], range=[0.25, 1])),
            tooltip=[
                alt.Tooltip("actor:N", title="Actor"),
                alt.Tooltip("period:N", title="Period"),
                alt.Tooltip("track_label:N", title="Track"),
                alt.Tooltip("position:Q", title="Position"),
                alt.Tooltip("certainty:Q", title="Confidence", format=".2f"),
            ],
        )
        .properties(
            width=max(300, 28 * len(periods)),
            height=alt.Step(row_height),
            title="Every actor's track, period by period" + shown,
        )
    )


_MEASURES = (
    ("actors", "Actors present"),
    ("ties", "Ties"),
    ("density", "Density"),
    ("isolate_share", "Share with no tie"),
)


def network_measures_chart(summary: pd.DataFrame, periods: Sequence[object]) -> alt.FacetChart:
    """Actors present, ties, density and share of isolates, period by period.

    Density is ties / n(n-1) for directed relations and ties / (n(n-1)/2) for
    undirected ones (Wasserman & Faust 1994, sec. 4.2), as computed upstream;
    the share with no tie is isolates / actors.
    """
    periods = _periods(periods)
    if summary is None or len(summary) == 0:
        return _empty_chart("No summary to draw.")
    s = _with_period_index(summary, periods)
    s["relation"] = s["relation"].astype(str) if "relation" in s else "all"
    actors = s["actors"].astype(float)
    share = s["isolates"].astype(float) / actors.where(actors > 0, 1.0)
    s["isolate_share"] = np.where(actors > 0, share, np.nan)
    long = s.melt(
        id_vars=["period", "relation"],
        value_vars=[key for key, _ in _MEASURES],
        var_name="key",
        value_name="value",
    )
    titles = dict(_MEASURES)
    long["measure"] = long["key"].map(titles)
    long["value"] = long["value"].astype(float)
    return (
        alt.Chart(_data(long[["period", "relation", "measure", "value"]]))
        .mark_line(point=True)
        .encode(
            x=alt.X("period:N", sort=periods, scale=alt.Scale(domain=periods), title="Period",
                    axis=alt.Axis(labelAngle=-45)),
            y=alt.Y("value:Q", title=None),
            color=alt.Color("relation:N", title="Relation", scale=alt.Scale(scheme="dark2")),
            tooltip=[
                alt.Tooltip("period:N", title="Period"),
                alt.Tooltip("relation:N", title="Relation"),
                alt.Tooltip("measure:N", title="Measure"),
                alt.Tooltip("value:Q", title="Value", format=",.3~f"),
            ],
        )
        .properties(width=max(360, 32 * len(periods)), height=110)
        .facet(row=alt.Row("measure:N", sort=[t for _, t in _MEASURES], title=None,
                           header=alt.Header(labelAngle=0, labelAlign="left")))
        .resolve_scale(y="independent")
        .properties(title="The network, period by period")
    )


def block_density_chart(
    blocks: pd.DataFrame,
    periods: Sequence[object],
    *,
    track_names: Mapping[int, str] | None = None,
) -> alt.FacetChart:
    """Density between tracks over time: one panel per sending track.

    Blocks of positions aligned to the same pair of tracks are pooled:
    density = sum of ties / sum of possible ties (Wasserman & Faust 1994,
    sec. 10.2). Line colour is the receiving track.
    """
    periods = _periods(periods)
    if blocks is None or len(blocks) == 0:
        return _empty_chart("No blocks to draw.")
    b = _with_period_index(blocks, periods)
    b = b.dropna(subset=["from_track", "to_track"])
    # Blocks touching the no-tie track are empty by definition.
    b = b[(b["from_track"].astype(int) != 0) & (b["to_track"].astype(int) != 0)]
    if len(b) == 0:
        return _empty_chart("No blocks aligned to tracks.")
    b["relation"] = b["relation"].astype(str) if "relation" in b else ""
    b["from_track"] = b["from_track"].astype(int)
    b["to_track"] = b["to_track"].astype(int)
    pooled = b.groupby(["pidx", "period", "relation", "from_track", "to_track"], as_index=False)[
        ["ties", "possible"]
    ].sum()
    pooled = pooled[pooled["possible"] > 0].copy()
    pooled["density"] = pooled["ties"].astype(float) / pooled["possible"].astype(float)
    pooled["from_label"] = [f"from {track_label(t, track_names)}" for t in pooled["from_track"]]
    pooled["to_label"] = [track_label(t, track_names) for t in pooled["to_track"]]
    tracks = pooled["to_track"].tolist()
    from_tracks = pooled["from_track"].tolist()
    from_sort = [f"from {label}" for label in _track_sort(from_tracks, track_names)]
    cols = ["period", "relation", "from_label", "to_label", "ties", "possible", "density"]
    return (
        alt.Chart(_data(pooled[cols]))
        .mark_line(point=True)
        .encode(
            x=alt.X("period:N", sort=periods, scale=alt.Scale(domain=periods), title="Period",
                    axis=alt.Axis(labelAngle=-45)),
            y=alt.Y("density:Q", title="Density"),
            color=alt.Color("to_label:N", title="To track",
                            scale=_track_scale(tracks, track_names),
                            sort=_track_sort(tracks, track_names)),
            tooltip=[
                alt.Tooltip("period:N", title="Period"),
                alt.Tooltip("relation:N", title="Relation"),
                alt.Tooltip("from_label:N", title="From"),
                alt.Tooltip("to_label:N", title="To"),
                alt.Tooltip("ties:Q", title="Ties"),
                alt.Tooltip("possible:Q", title="Possible"),
                alt.Tooltip("density:Q", title="Density", format=".3f"),
            ],
        )
        .properties(width=max(220, 18 * len(periods)), height=110)
        .facet(row=alt.Row("from_label:N", sort=from_sort, title=None,
                           header=alt.Header(labelAngle=0, labelAlign="left")),
               column=alt.Column("relation:N", title=None))
        .properties(title="Density between tracks over time")
    )


def fit_chart(
    diagnostics: pd.DataFrame | None,
    permutation: pd.DataFrame | None = None,
    periods: Sequence[object] | None = None,
) -> alt.TopLevelMixin:
    """How well the positions fit: against the number of positions, and by test.

    Left: the correlation between the data and the block-density matrix
    (Wasserman & Faust 1994, sec. 10.4.2) and the count of inconsistencies with
    the image (Doreian, Batagelj & Ferligoj 2005), for each number of positions
    ``k`` tried in each period; large points mark the ``k`` that was chosen.
    Right: the fit-test p-value of each period (the share of null-model
    networks on which the same method fits at least as well; see
    :mod:`tracker.inference.fit_test`); the rule is the 0.05 level.  Its
    tooltip shows the test's statistic.  Both panels' correlations are over
    the actors with at least one tie (isolates left out, as in the test);
    the fit table's ``density_correlation`` keeps the isolates' position and
    differs from them when a period has isolates.
    """
    panels = []
    order = _periods(periods) if periods is not None else None
    if diagnostics is not None and len(diagnostics):
        d = diagnostics.copy()
        d["period"] = d["period"].astype(str)
        d["chosen"] = d["chosen"].fillna(False).astype(bool) if "chosen" in d else False
        d["picked"] = d["chosen"].map({True: "chosen", False: "tried"})
        if order is None:
            order = list(dict.fromkeys(d["period"]))
        colour = alt.Color("period:N", title="Period", sort=order,
                           scale=alt.Scale(scheme="viridis"),
                           legend=alt.Legend(columns=2 if len(order) > 12 else 1))
        tip = [
            alt.Tooltip("period:N", title="Period"),
            alt.Tooltip("k:Q", title="Positions"),
            alt.Tooltip("density_correlation:Q", title="Correlation", format=".3f"),
            alt.Tooltip("inconsistencies:Q", title="Inconsistencies"),
            alt.Tooltip("picked:N", title="Chosen"),
        ]
        cols = ["period", "k", "density_correlation", "inconsistencies", "picked"]
        base = alt.Chart(_data(d[[c for c in cols if c in d]])).encode(
            x=alt.X("k:O", title="Number of positions", axis=alt.Axis(labelAngle=0)),
            color=colour,
        )
        size = alt.Size("picked:O", title=None, sort=["tried", "chosen"],
                        scale=alt.Scale(domain=["tried", "chosen"], range=[20, 140]))
        for field, title in (("density_correlation", "Correlation with block densities"),
                             ("inconsistencies", "Inconsistencies with the image")):
            if field not in d:
                continue
            panels.append(
                alt.layer(
                    base.mark_line(opacity=0.6).encode(y=alt.Y(f"{field}:Q", title=title)),
                    base.mark_point(filled=True).encode(y=f"{field}:Q", size=size, tooltip=tip),
                ).properties(width=300, height=160)
            )
    left = alt.vconcat(*panels) if panels else None
    right = None
    if permutation is not None and len(permutation):
        p = permutation.copy()
        p["period"] = p["period"].astype(str)
        p["verdict"] = np.where(p["p_value"].astype(float) < SIGNIFICANCE,
                                "better than random", "not better than random")
        sort = order if order is not None else list(dict.fromkeys(p["period"]))
        points = alt.Chart(_data(p[["period", "observed", "p_value", "verdict"]])).mark_point(
            filled=True, size=70
        ).encode(
            x=alt.X("period:N", sort=sort, title="Period", axis=alt.Axis(labelAngle=-45)),
            y=alt.Y("p_value:Q", title="Fit-test p-value", scale=alt.Scale(domain=[0, 1])),
            color=alt.Color("verdict:N", title="Fit",
                            scale=alt.Scale(domain=["better than random", "not better than random"],
                                            range=["#0072b2", "#d55e00"])),
            tooltip=[
                alt.Tooltip("period:N", title="Period"),
                alt.Tooltip("observed:Q", title="Density correlation, actors with a tie", format=".3f"),
                alt.Tooltip("p_value:Q", title="p-value", format=".3f"),
            ],
        )
        rule = alt.Chart(_data(pd.DataFrame({"level": [SIGNIFICANCE]}))).mark_rule(
            strokeDash=[4, 3], color="#555555"
        ).encode(y="level:Q")
        right = alt.layer(points, rule).properties(width=max(240, 22 * len(sort)), height=160)
    if left is None and right is None:
        return _empty_chart("No fit diagnostics to draw.")
    if left is None:
        chart = right
    elif right is None:
        chart = left
    else:
        chart = alt.hconcat(left, right).resolve_scale(color="independent", size="independent")
    return chart.properties(title="Goodness of fit")


def structure_chart(structures: pd.DataFrame, periods: Sequence[object]) -> alt.FacetChart:
    """Which ideal image each period resembles, and how closely.

    One cell per period and ideal type (cohesive subgroups, core-periphery,
    centralized, hierarchy, transitive; Wasserman & Faust 1994, sec. 10.3),
    coloured by the fit reported upstream and labelled with it; a dark outline
    marks clear structures (the table's ``significant``; without it, an ideal
    p-value below 0.05).
    """
    periods = _periods(periods)
    if structures is None or len(structures) == 0:
        return _empty_chart("No structures to draw.")
    s = _with_period_index(structures, periods)
    s["relation"] = s["relation"].astype(str) if "relation" in s else ""
    s["ideal"] = s["ideal"].astype(str)
    s["fit"] = s["fit"].astype(float)
    if "p_value" not in s:
        s["p_value"] = np.nan
    if "significant" in s:  # the verdict of the structures table (ideal and fit test, q-values)
        s["significant"] = np.where(s["significant"].map(lambda v: v is True or v == True), "yes", "no")  # noqa: E712
    else:
        s["significant"] = np.where(s["p_value"].astype(float) < SIGNIFICANCE, "yes", "no")
    if "roles" in s:
        s["roles"] = [_text(v) for v in s["roles"]]
    cols = [c for c in ["period", "relation", "ideal", "mismatches", "fit", "p_value",
                        "roles", "significant"] if c in s]
    base = alt.Chart().encode(
        x=alt.X("period:N", sort=periods, scale=alt.Scale(domain=periods), title="Period",
                axis=alt.Axis(labelAngle=-45)),
        y=alt.Y("ideal:N", title=None),
    )
    tip = [alt.Tooltip(f"{c}:{'Q' if c in ('fit', 'p_value', 'mismatches') else 'N'}")
           for c in cols if c != "significant"]
    rect = base.mark_rect().encode(
        color=alt.Color("fit:Q", title="Fit",
                        scale=alt.Scale(range=["#f3faf0", "#74c476"])),
        stroke=alt.condition("datum.significant == 'yes'", alt.value("#222222"),
                             alt.value("white")),
        strokeWidth=alt.condition("datum.significant == 'yes'", alt.value(2), alt.value(0.5)),
        tooltip=tip,
    )
    text = base.mark_text(fontSize=9).encode(text=alt.Text("fit:Q", format=".2f"))
    return (
        alt.layer(rect, text, data=_data(s[cols]))
        .properties(width=max(300, 34 * len(periods)), height=alt.Step(24))
        .facet(row=alt.Row("relation:N", title=None,
                           header=alt.Header(labelAngle=0, labelAlign="left")))
        .properties(title="Ideal images and their fit")
    )


# --------------------------------------------------------------------------- registry

#: Chart name -> function. Inputs of each function are in :data:`CHART_INPUTS`.
def calibration_chart(calibration: pd.DataFrame, periods: Sequence[object] = ()) -> alt.LayerChart:
    """Reliability curve of move confidence: mean confidence per bin against the share of moves that are real.

    ``calibration`` has one row per confidence bin (``bin_low, bin_high,
    moves, mean_confidence, share_real``), from
    :func:`tracker.pipeline.calibration.calibration_check`.  Points on the
    diagonal mean the confidence is the probability that a move is real
    (reliability diagram, DeGroot & Fienberg 1983); point size is the number
    of moves in the bin.
    """
    if calibration is None or len(calibration) == 0:
        return _empty_chart("No calibration check yet: run roletrail calibration.")
    frame = calibration.dropna(subset=["mean_confidence", "share_real"]).copy()
    frame["bin"] = [f"{lo:.1f}-{hi:.1f}" for lo, hi in zip(frame["bin_low"], frame["bin_high"])]
    diagonal = alt.Chart(_data(pd.DataFrame({"x": [0.0, 1.0], "y": [0.0, 1.0]}))).mark_line(
        strokeDash=[4, 4], color="#888").encode(x="x:Q", y="y:Q")
    axis = alt.Scale(domain=[0, 1])
    points = (
        alt.Chart(_data(frame[["bin", "moves", "mean_confidence", "share_real"]]))
        .mark_line(point=True, color="#1f5f8b")
        .encode(
            x=alt.X("mean_confidence:Q", scale=axis, title="Confidence given to moves"),
            y=alt.Y("share_real:Q", scale=axis, title="Share of those moves that are real"),
            size=alt.Size("moves:Q", title="Moves", legend=None),
            tooltip=[alt.Tooltip("bin:N", title="Confidence bin"), alt.Tooltip("moves:Q", title="Moves"),
                     alt.Tooltip("mean_confidence:Q", title="Mean confidence", format=".2f"),
                     alt.Tooltip("share_real:Q", title="Share real", format=".2f")],
        )
    )
    return alt.layer(diagonal, points).properties(width=260, height=260, title="Is move confidence a probability?")


CHARTS: dict[str, Callable[..., alt.TopLevelMixin]] = {
    "flow": flow_chart,
    "matrix": matrix_chart,
    "trajectory": trajectory_chart,
    "timeline": timeline_chart,
    "measures": network_measures_chart,
    "block-density": block_density_chart,
    "fit": fit_chart,
    "structure": structure_chart,
    "calibration": calibration_chart,
}

#: Chart name -> the names of the tables its function takes, in order.
CHART_INPUTS: dict[str, tuple[str, ...]] = {
    "flow": ("memberships",),
    "matrix": ("blocks",),
    "trajectory": ("memberships",),
    "timeline": ("memberships",),
    "measures": ("summary",),
    "block-density": ("blocks",),
    "fit": ("diagnostics", "permutation"),
    "structure": ("structures",),
    "calibration": ("calibration",),
}

_NAMED_TRACKS = {"flow", "matrix", "trajectory", "timeline", "block-density"}


def make_chart(
    name: str,
    tables: Mapping[str, pd.DataFrame],
    periods: Sequence[object],
    **options: object,
) -> alt.TopLevelMixin:
    """Build the chart ``name`` from the report tables (the dispatcher of the CLI).

    Tables a chart needs are looked up by the names in :data:`CHART_INPUTS`;
    track names come from ``tables["tracks"]`` unless given in ``options``.
    """
    if name not in CHARTS:
        raise UsageError(f"unknown chart {name!r}; choose one of {', '.join(sorted(CHARTS))}")
    args = [tables.get(table) for table in CHART_INPUTS[name]]
    if name == "fit":
        return fit_chart(*args, periods=periods)
    if name in _NAMED_TRACKS and "track_names" not in options:
        options["track_names"] = track_names_from(tables.get("tracks"))
    return CHARTS[name](*args, periods, **options)


def save_chart(chart: alt.TopLevelMixin | dict, path: str | Path, *, scale: float = 2.0) -> Path:
    """Write a chart to ``path``; the suffix decides the format.

    ``.png`` and ``.svg`` are rendered by vl-convert (no browser, no network);
    ``.json`` is the Vega-Lite specification itself.

    Returns
    -------
    pathlib.Path
        The path written.
    """
    path = Path(path)
    spec = chart if isinstance(chart, dict) else chart.to_dict()
    suffix = path.suffix.lower()
    if suffix == ".json":
        path.write_text(json.dumps(spec, indent=1, ensure_ascii=False), encoding="utf-8")
        return path
    if suffix not in (".png", ".svg"):
        raise UsageError(
            f"cannot write {path.name!r}; give a file name ending in .png, .svg or .json"
        )
    import vl_convert as vlc

    version = vegalite_version()
    if suffix == ".png":
        path.write_bytes(vlc.vegalite_to_png(spec, vl_version=version, scale=scale))
    else:
        path.write_text(vlc.vegalite_to_svg(spec, vl_version=version), encoding="utf-8")
    return path


def vegalite_version() -> str | None:
    """The Vega-Lite version of the installed altair, as vl-convert names it."""
    import vl_convert as vlc

    wanted = ".".join(alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
    return wanted if wanted in vlc.get_vegalite_versions() else None


# --------------------------------------------------------------------------- helpers


def _periods(periods: Sequence[object] | None) -> list[str]:
    if periods is None:
        return []
    return [str(p) for p in periods]


def _actor_tracks(memberships: pd.DataFrame, periods: list[str], track_names) -> pd.DataFrame:
    """Memberships with period index, text actor, integer track, its display label and certainty."""
    m = _with_period_index(memberships, periods)
    m["actor"] = m["actor"].astype(str)
    m["track"] = m["track"].astype(int)
    m["track_label"] = _track_labels(m["track"], track_names)
    m["certainty"] = _confidence(m)
    return m


#: Most actors drawn one by one (timeline rows, trajectory choices) in a chart.
ACTOR_LIMIT = 300

#: Most actor-period cells of a per-actor chart by default: with many periods
#: fewer actors are drawn (at least :data:`ACTOR_FLOOR`), so the page stays a
#: few megabytes (at 50 periods, 300 actors in the timeline and the trajectory
#: list took 3.2 MB of a 5.8 MB report).
ACTOR_CELLS = 6000

#: Fewest actors a per-actor chart keeps by default, however many periods.
ACTOR_FLOOR = 60


def busiest_actors(m: pd.DataFrame, limit: int) -> list[str]:
    """The ``limit`` actors who changed track most often, then by label.

    ``m`` has columns ``actor``, ``pidx`` (period index) and ``track``; a
    change is a different track at the actor's next presence.
    """
    m = m.sort_values(["actor", "pidx"], kind="stable")
    same_actor = m["actor"].to_numpy()[1:] == m["actor"].to_numpy()[:-1]
    changed = same_actor & (m["track"].to_numpy()[1:] != m["track"].to_numpy()[:-1])
    counts = pd.Series(changed.astype(int), index=m["actor"].to_numpy()[1:]).groupby(level=0).sum()
    counts = counts.reindex(m["actor"].unique(), fill_value=0)
    ranked = sorted(counts.items(), key=lambda item: (-item[1], item[0]))
    return [actor for actor, _ in ranked[:limit]]


def _limit_actors(m: pd.DataFrame, max_actors: int | None, keep: object = None) -> tuple[pd.DataFrame, str]:
    """At most ``max_actors`` actors of ``m`` (the busiest, plus ``keep``) and a title suffix."""
    if max_actors is None:
        limit = min(ACTOR_LIMIT, max(ACTOR_FLOOR, ACTOR_CELLS // max(1, m["pidx"].nunique())))
    else:
        limit = int(max_actors)
    total = m["actor"].nunique()
    if total <= limit:
        return m, ""
    chosen = set(busiest_actors(m, limit))
    if keep is not None and str(keep) in set(m["actor"]):
        chosen.add(str(keep))
    out = m[m["actor"].isin(chosen)].reset_index(drop=True)
    return out, f": {len(chosen):,} of {total:,} actors, those who changed track most often"


def _with_period_index(frame: pd.DataFrame, periods: list[str]) -> pd.DataFrame:
    """Copy with ``period`` as text and ``pidx`` its place in ``periods``.

    Rows of periods not in the list are dropped (the caller chose the periods).
    """
    out = frame.copy()
    out["period"] = out["period"].astype(str)
    index = {p: i for i, p in enumerate(periods)}
    out["pidx"] = out["period"].map(index)
    out = out[out["pidx"].notna()].copy()
    out["pidx"] = out["pidx"].astype(int)
    return out.reset_index(drop=True)


def _confidence(m: pd.DataFrame) -> pd.Series:
    if "confidence" not in m:
        return pd.Series(1.0, index=m.index)
    return pd.to_numeric(m["confidence"], errors="coerce").fillna(1.0).clip(0.0, 1.0)


def _isolate(m: pd.DataFrame) -> pd.Series:
    if "isolate" in m:
        return m["isolate"].fillna(False).astype(bool)
    return m["track"].astype(int) == 0


def _data(frame: pd.DataFrame) -> dict:
    """Inline data with JSON-clean values (no NaN, no numpy scalars).

    A plain ``{"values": [...]}`` rather than ``alt.InlineData``: altair checks
    a schema object row by row when it is made, which takes seconds for a few
    thousand rows; the plain form is checked once, by ``to_dict``.
    """
    return {"values": [{k: _clean(v) for k, v in row.items()} for row in frame.to_dict("records")]}


def _clean(value: object) -> object:
    if type(value) is str:  # the most common value, and pd.isna of a string is slow
        return value
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return None if math.isnan(value) or math.isinf(value) else float(value)
    if _missing(value):
        return None
    return value if isinstance(value, str) else str(value)


def _text(value: object) -> str:
    if _missing(value):
        return ""
    if isinstance(value, (list, tuple, dict)):
        return json.dumps(value, ensure_ascii=False)
    return str(value)


def _missing(value: object) -> bool:
    if value is None:
        return True
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _empty_chart(message: str) -> alt.Chart:
    return (
        alt.Chart(_data(pd.DataFrame({"message": [message]})))
        .mark_text(fontSize=13, color="#555555")
        .encode(text="message:N")
        .properties(width=360, height=40)
    )
