r"""Persistent tracks: the positions of successive periods linked into one story.

Position numbers are arbitrary in every period (label switching), so comparing
periods needs an alignment.  Each period's positions are linked to *tracks*
(persistent positions) by maximum-weight matching -- the Hungarian method of
Kuhn [1]_, here :func:`scipy.optimize.linear_sum_assignment` -- on a similarity
that combines who is in the position with what the position does:

.. math::

    s(p, k) = w \, J(p, k) + (1 - w) \, \rho(p, k)

* :math:`J(p, k) = |M_p \cap M_k| / |M_p \cup M_k|` is the Jaccard overlap of the
  members of position *p* now and the members of track *k* in the last period
  where the track was seen, both restricted to the actors present in both
  periods (an actor who has left the data cannot belong to either side).
* :math:`\rho(p, k) = 1 - \operatorname{mean} |d_p - d_k|` is role similarity:
  the position's block densities (its diagonal block, and its row and its
  column of the density table -- the same for an undirected relation -- in
  every relation) are
  compared with the track's last ones, entry by entry, after the other
  positions of both periods are re-indexed by the tracks they belong to.  Each
  period's densities are first divided by the period's largest ordinary block
  density (per relation), so a period that is sparser overall is compared by its
  pattern, not its level.  Only tracks present on both sides are compared.

The current period's tracks are not known before the matching, so the mapping
used by :math:`\rho` comes from a provisional matching on overlap alone; then
the final matching uses the combined similarity (greedy one-step refinement).

Beyond one-to-one links the events of community evolution of Greene, Doyle &
Cunningham [2]_ (after Palla, Barabasi & Vicsek [3]_) are recognised:

* **continue** -- a matched pair with :math:`s \ge` ``link_threshold`` (or with
  overlap above ``split_threshold``);
* **birth** -- a position left unmatched starts a new track;
* **split** -- an unmatched position whose overlap with an already continuing
  track exceeds ``split_threshold`` starts a new track whose ``parent`` is that
  track;
* **merge** -- an unmatched track whose overlap with a continuing position
  exceeds ``split_threshold`` ends, ``merged_into`` the track that position
  continues;
* **end** -- an unmatched track that is not merged ends (after ``max_gap``
  periods of absence, if a gap is allowed).

The position of tieless actors (``isolates``) is never matched: it always maps
to the reserved track :data:`ISOLATES_TRACK` (0), never mixed with ordinary
tracks, and no link is recorded for it.  Ordinary track ids are 1, 2, ... in
order of first appearance (period order, then position order).

References
----------
.. [1] Kuhn, H. W. (1955). The Hungarian method for the assignment problem.
   Naval Research Logistics Quarterly 2, 83-97.
.. [2] Greene, D., Doyle, D. & Cunningham, P. (2010). Tracking the evolution of
   communities in dynamic social networks. ASONAM.
.. [3] Palla, G., Barabasi, A.-L. & Vicsek, T. (2007). Quantifying social group
   evolution. Nature 446, 664-667.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from tracker.errors import UsageError

__all__ = [
    "ISOLATES_TRACK",
    "PeriodPositions",
    "TrackInfo",
    "Link",
    "Alignment",
    "align",
    "fixed_position_tracks",
    "max_weight_matching",
    "memberships",
]

#: Track id of the isolates' position in every period ("no tie in this period").
ISOLATES_TRACK = 0

#: Assignment value of a position that holds no actor in its period.
EMPTY_POSITION = -1


@dataclass(frozen=True, eq=False)
class PeriodPositions:
    """The positions found in one period: the input of :func:`align`.

    Attributes
    ----------
    period : str
    actors : tuple of str
        Actors present in the period, in the order of ``labels``.
    labels : numpy.ndarray of int, shape (n,)
        Position of each actor, ``0 .. n_positions - 1``.
    n_positions : int
        Number of positions, the isolates' position included.
    isolates : int or None
        Label of the position of tieless actors, if any.
    density : numpy.ndarray, shape (R, B, B), or None
        Block densities per relation (``B = n_positions``).  ``None`` drops role
        similarity for this period (overlap alone is used).
    """

    period: str
    actors: tuple[str, ...]
    labels: np.ndarray
    n_positions: int
    isolates: int | None = None
    density: np.ndarray | None = None

    def __post_init__(self) -> None:
        labels = np.asarray(self.labels, dtype=np.int64).ravel()
        actors = tuple(str(a) for a in self.actors)
        object.__setattr__(self, "labels", labels)
        object.__setattr__(self, "actors", actors)
        if labels.size != len(actors):
            raise UsageError(
                f"period {self.period}: {labels.size} labels for {len(actors)} actors; "
                "give one position label per actor"
            )
        if len(set(actors)) != len(actors):
            raise UsageError(f"period {self.period}: an actor is listed twice; list each actor once")
        if labels.size and (labels.min() < 0 or labels.max() >= self.n_positions):
            raise UsageError(
                f"period {self.period}: position labels must lie in 0 .. {self.n_positions - 1}"
            )
        if self.isolates is not None and not 0 <= self.isolates < self.n_positions:
            raise UsageError(f"period {self.period}: the isolates' label is not a position")
        if self.density is not None:
            dens = np.asarray(self.density, dtype=np.float64)
            if dens.ndim == 2:
                dens = dens[None]
            if dens.shape[1:] != (self.n_positions, self.n_positions):
                raise UsageError(
                    f"period {self.period}: density must have shape (R, {self.n_positions}, "
                    f"{self.n_positions}); compute it from the same partition"
                )
            object.__setattr__(self, "density", dens)

    @classmethod
    def from_partition(cls, period, actors, partition, density=None) -> "PeriodPositions":
        """Build from a :class:`tracker.blockmodel.partition.Partition`."""
        return cls(
            str(period), tuple(actors), partition.labels, partition.n_positions,
            partition.isolates, density,
        )


@dataclass(frozen=True)
class TrackInfo:
    """One persistent position.

    Attributes
    ----------
    id : int
        ``0`` for the isolates' track, ordinary tracks from 1.
    first_period, last_period : str
        First and last period in which the track holds a position.
    parent : int or None
        The track it split from (``None`` for a plain birth).
    merged_into : int or None
        The track it merged into, if it ended by a merge.
    ended : str or None
        The first period in which the track was missing for good (or the period
        of its merge); ``None`` while the track is open.
    isolates : bool
        True only for track 0.
    """

    id: int
    first_period: str
    last_period: str
    parent: int | None = None
    merged_into: int | None = None
    ended: str | None = None
    isolates: bool = False


@dataclass(frozen=True)
class Link:
    """One event between periods: a track continues, is born, splits, merges or ends.

    ``from_*`` fields are ``None`` for a birth and ``to_*`` fields are ``None`` for an
    end.  ``similarity``, ``overlap`` and ``role_similarity`` are ``nan`` where they do
    not apply (births and ends; role similarity without densities).
    """

    from_period: str | None
    to_period: str | None
    from_track: int | None
    to_track: int | None
    from_position: int | None
    to_position: int | None
    similarity: float
    overlap: float
    role_similarity: float
    kind: str


@dataclass(frozen=True, eq=False)
class Alignment:
    """Tracks over periods.

    Attributes
    ----------
    periods : tuple of str
        The aligned periods, in time order.
    tracks : dict of int to TrackInfo
        Every track, the isolates' track 0 included when some period has isolates.
    assignment : dict of str to numpy.ndarray
        For each period, ``assignment[period][position]`` is the track id of that
        position (``0`` for isolates, ``-1`` for a position without members).
    links : list of Link
        Events in period order.
    """

    periods: tuple[str, ...]
    tracks: dict[int, TrackInfo]
    assignment: dict[str, np.ndarray]
    links: list[Link] = field(default_factory=list)

    def tracks_of(self, period: str, labels) -> np.ndarray:
        """Track id of each actor, given the actors' position labels in ``period``."""
        return self.assignment[period][np.asarray(labels, dtype=np.int64)]

    def links_frame(self) -> pd.DataFrame:
        """The links as a data frame (one row per link)."""
        cols = [f.name for f in dataclasses.fields(Link)]
        return pd.DataFrame([dataclasses.astuple(link) for link in self.links], columns=cols)


def max_weight_matching(weights) -> tuple[np.ndarray, np.ndarray]:
    r"""Maximum-weight one-to-one matching of rows to columns (Hungarian method).

    Returns ``(rows, cols)`` maximising :math:`\sum w_{r c}` over matchings that pair
    ``min(n_rows, n_cols)`` rows and columns, as :func:`scipy.optimize.linear_sum_assignment`
    with ``maximize=True`` (Kuhn 1955).  ``nan`` weights count as 0.

    Examples
    --------
    >>> rows, cols = max_weight_matching([[0.1, 0.9], [0.8, 0.3]])
    >>> rows.tolist(), cols.tolist()
    ([0, 1], [1, 0])
    """
    w = np.nan_to_num(np.asarray(weights, dtype=np.float64), nan=0.0)
    if w.ndim != 2 or w.size == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    rows, cols = linear_sum_assignment(w, maximize=True)
    return rows.astype(np.int64), cols.astype(np.int64)


def align(
    periods: Sequence[PeriodPositions],
    *,
    previous: Alignment | None = None,
    weight_overlap: float = 0.5,
    link_threshold: float = 0.2,
    split_threshold: float = 0.3,
    max_gap: int = 0,
) -> Alignment:
    r"""Link each period's positions to persistent tracks.

    Parameters
    ----------
    periods : sequence of PeriodPositions
        All periods, in time order.
    previous : Alignment, optional
        An alignment of a prefix of ``periods`` (same period labels, same order).
        Its tracks, assignments and links are kept exactly; only the later periods
        are aligned, with the same result as aligning everything at once.
    weight_overlap : float in [0, 1]
        :math:`w` in :math:`s = w J + (1 - w) \rho` (module docstring).  A pair
        without densities on either side uses :math:`s = J`.
    link_threshold : float
        Least similarity for a matched pair to continue a track.
    split_threshold : float
        Least overlap (Jaccard) for a split or a merge.
    max_gap : int
        Number of periods a track may be missing and still be continued
        (0: a track missing once ends).

    Returns
    -------
    Alignment

    Examples
    --------
    >>> import numpy as np
    >>> a = PeriodPositions("2001", ("a", "b", "c", "d"), np.array([0, 0, 1, 1]), 2)
    >>> b = PeriodPositions("2002", ("a", "b", "c", "d"), np.array([1, 1, 0, 0]), 2)
    >>> al = align([a, b])
    >>> al.assignment["2001"].tolist(), al.assignment["2002"].tolist()
    ([1, 2], [2, 1])
    """
    if not 0.0 <= weight_overlap <= 1.0:
        raise UsageError("weight_overlap must lie between 0 and 1")
    if max_gap < 0:
        raise UsageError("max_gap must be 0 or more")
    periods = list(periods)
    names = [p.period for p in periods]
    if len(set(names)) != len(names):
        raise UsageError("a period is listed twice; give each period once, in time order")
    state = _State(periods)
    start = 0
    if previous is not None:
        start = len(previous.periods)
        if tuple(names[:start]) != tuple(previous.periods):
            raise UsageError(
                "the previous alignment does not cover a prefix of these periods; "
                "align from scratch or pass the periods in the same order"
            )
        state.restore(previous)
    for t in range(start, len(periods)):
        state.step(t, weight_overlap, link_threshold, split_threshold, max_gap)
    return Alignment(
        periods=tuple(names),
        tracks=dict(sorted(state.tracks.items())),
        assignment={names[t]: state.assignment[names[t]] for t in range(len(periods))},
        links=state.links,
    )


def fixed_position_tracks(periods: Sequence[PeriodPositions], max_gap: int = 0) -> Alignment:
    """Tracks of a model whose positions mean the same in every period (a dynamic blockmodel).

    No matching is needed: position ``k`` continues as itself.  A track is
    born in the first period its position holds an actor and lives while the
    position is occupied.  As in the life cycle of Greene, Doyle & Cunningham
    [2]_, a position left empty for more than ``max_gap`` consecutive periods
    ends its track, unless an actor of its last occupied period is back in it
    when it is occupied again (member continuity, the overlap of [2]_ above
    zero): then the track continues.  Otherwise the position starts a new
    track there, so a position that held one stray actor years before the
    group that fills it later is not dated to that stray period.

    Track ids: the first track of position ``k`` is ``k + 1``; tracks born
    later take ids above every position's, in order of birth.  The isolates'
    position maps to :data:`ISOLATES_TRACK`.  Links: ``continue`` between
    consecutive periods of a track, ``birth`` for a track born after the
    first period.
    """
    if int(max_gap) < 0:
        raise UsageError("max_gap must be 0 or more")
    periods = list(periods)
    n_max = max((pp.n_positions for pp in periods), default=0)
    next_id = n_max + 1
    current: dict[int, int] = {}  # position -> its open track
    last_seen: dict[int, tuple[int, set]] = {}  # position -> (period index, members)
    assignment, spans, links, ended = {}, {}, [], {}
    for t, pp in enumerate(periods):
        sizes = np.bincount(pp.labels, minlength=pp.n_positions)
        track = np.full(pp.n_positions, EMPTY_POSITION, dtype=np.int64)
        for k in np.flatnonzero(sizes):
            k = int(k)
            if pp.isolates is not None and k == pp.isolates:
                track[k] = ISOLATES_TRACK
                continue
            members = {pp.actors[i] for i in np.flatnonzero(pp.labels == k)}
            if k in current:
                s, before = last_seen[k]
                if t - s - 1 > int(max_gap) and not (before & members):
                    ended[current[k]] = periods[s + 1].period
                    current[k] = next_id
                    next_id += 1
            else:
                current[k] = k + 1
            if current[k] not in spans:
                spans[current[k]] = [pp.period, pp.period]
                if t > 0:
                    links.append(Link(None, pp.period, None, current[k], None, k, np.nan, np.nan, np.nan, "birth"))
            elif last_seen[k][0] == t - 1:
                links.append(Link(periods[t - 1].period, pp.period, current[k], current[k], k, k, 1.0, np.nan,
                                  np.nan, "continue"))
            spans[current[k]][1] = pp.period
            last_seen[k] = (t, members)
            track[k] = current[k]
        assignment[pp.period] = track
    tracks = {tid: TrackInfo(tid, first, last, ended=ended.get(tid)) for tid, (first, last) in spans.items()}
    if any((a == ISOLATES_TRACK).any() for a in assignment.values()):
        seen = [p for p, a in assignment.items() if (a == ISOLATES_TRACK).any()]
        tracks[ISOLATES_TRACK] = TrackInfo(ISOLATES_TRACK, seen[0], seen[-1], isolates=True)
    return Alignment(tuple(pp.period for pp in periods), dict(sorted(tracks.items())), assignment, links)


def memberships(periods: Sequence[PeriodPositions], alignment: Alignment) -> pd.DataFrame:
    """Tidy table of actors' positions and tracks: columns period, actor, position, track.

    This is the input of :mod:`tracker.longitudinal.movement`.
    """
    frames = []
    for pp in periods:
        frames.append(
            pd.DataFrame(
                {
                    "period": pp.period,
                    "actor": list(pp.actors),
                    "position": pp.labels,
                    "track": alignment.assignment[pp.period][pp.labels],
                }
            )
        )
    if not frames:
        return pd.DataFrame(columns=["period", "actor", "position", "track"])
    return pd.concat(frames, ignore_index=True)


class _State:
    """Book-keeping of the alignment while periods are added one by one."""

    def __init__(self, periods: list[PeriodPositions]) -> None:
        self.periods = periods
        self.index = {p.period: t for t, p in enumerate(periods)}
        self.tracks: dict[int, TrackInfo] = {}
        self.assignment: dict[str, np.ndarray] = {}
        self.links: list[Link] = []
        self.next_id = 1
        self._actor_index: dict[int, dict[str, int]] = {}

    # -- state -------------------------------------------------------------
    def restore(self, previous: Alignment) -> None:
        self.tracks = dict(previous.tracks)
        self.assignment = {k: np.asarray(v).copy() for k, v in previous.assignment.items()}
        self.links = list(previous.links)
        ordinary = [k for k in self.tracks if k != ISOLATES_TRACK]
        self.next_id = max(ordinary, default=0) + 1
        for name in previous.periods:
            pp = self.periods[self.index[name]]
            if self.assignment[name].size != pp.n_positions:
                raise UsageError(
                    f"period {name}: the previous alignment has another number of positions; "
                    "align from scratch"
                )

    def _actors(self, t: int) -> dict[str, int]:
        if t not in self._actor_index:
            self._actor_index[t] = {a: i for i, a in enumerate(self.periods[t].actors)}
        return self._actor_index[t]

    def _open_tracks(self) -> list[int]:
        return [k for k, info in self.tracks.items() if not info.isolates and info.ended is None]

    def _position_of(self, k: int) -> tuple[int, int]:
        """(period index, position) of track k where it was last seen."""
        info = self.tracks[k]
        s = self.index[info.last_period]
        return s, int(np.flatnonzero(self.assignment[info.last_period] == k)[0])

    # -- one period --------------------------------------------------------
    def step(self, t, weight_overlap, link_threshold, split_threshold, max_gap) -> None:
        pp = self.periods[t]
        sizes = np.bincount(pp.labels, minlength=pp.n_positions)
        assign = np.full(pp.n_positions, EMPTY_POSITION, dtype=np.int64)
        if pp.isolates is not None and sizes[pp.isolates] > 0:
            assign[pp.isolates] = ISOLATES_TRACK
            info = self.tracks.get(ISOLATES_TRACK)
            self.tracks[ISOLATES_TRACK] = (
                TrackInfo(ISOLATES_TRACK, pp.period, pp.period, isolates=True)
                if info is None
                else dataclasses.replace(info, last_period=pp.period)
            )
        positions = [
            p for p in range(pp.n_positions) if sizes[p] > 0 and p != pp.isolates
        ]
        tracks = self._open_tracks()
        where = {k: self._position_of(k) for k in tracks}

        overlap = self._overlap(t, positions, tracks, where)
        # Provisional mapping from overlap alone, used to read the role pattern.
        rows, cols = max_weight_matching(overlap)
        provisional = {positions[r]: tracks[c] for r, c in zip(rows, cols) if overlap[r, c] > 0}
        role = self._role(t, positions, tracks, where, provisional)
        sim = np.where(np.isnan(role), overlap, weight_overlap * overlap + (1 - weight_overlap) * role)

        rows, cols = max_weight_matching(sim)
        matched_pos: dict[int, int] = {}  # position index -> track index
        for r, c in zip(rows, cols):
            if sim[r, c] >= link_threshold or overlap[r, c] > split_threshold:
                matched_pos[r] = c
        matched_trk = {c: r for r, c in matched_pos.items()}

        def link(kind, r, c, new_track=None):
            s, q = where[tracks[c]]
            return Link(
                self.periods[s].period, pp.period, tracks[c],
                tracks[c] if new_track is None else new_track, q, positions[r],
                float(sim[r, c]), float(overlap[r, c]), float(role[r, c]), kind,
            )

        # The matching maximises a sum and may pass over a strong pair; a position it
        # left out takes a free track it overlaps strongly (strongest pairs first).
        rescue = sorted(
            (
                (-overlap[r, c], r, c)
                for r in range(len(positions))
                for c in range(len(tracks))
                if r not in matched_pos and c not in matched_trk and overlap[r, c] > split_threshold
            )
        )
        for _, r, c in rescue:
            if r not in matched_pos and c not in matched_trk:
                matched_pos[r] = c
                matched_trk[c] = r
        for r, c in matched_pos.items():
            assign[positions[r]] = tracks[c]
        # Other positions: a split of a continuing track, or a birth.
        events: list[tuple[int, str, int | None]] = []
        for r in range(len(positions)):
            if r in matched_pos:
                continue
            c = int(np.argmax(overlap[r])) if tracks else -1
            if c >= 0 and overlap[r, c] > split_threshold:
                events.append((r, "split", c))  # c is continuing, else it was rescued above
            else:
                events.append((r, "birth", None))
        continuing = sorted(matched_pos.items())
        for r, c in continuing:
            k = tracks[c]
            self.tracks[k] = dataclasses.replace(self.tracks[k], last_period=pp.period)
            self.links.append(link("continue", r, c))
        for r, kind, c in events:
            k = self.next_id
            self.next_id += 1
            assign[positions[r]] = k
            parent = tracks[c] if kind == "split" else None
            self.tracks[k] = TrackInfo(k, pp.period, pp.period, parent=parent)
            if kind == "split":
                self.links.append(link("split", r, c, new_track=k))
            else:
                self.links.append(
                    Link(None, pp.period, None, k, None, positions[r], np.nan, np.nan, np.nan, "birth")
                )
        # Unmatched tracks: merged into a continuing position, or ended.
        for c, k in enumerate(tracks):
            if c in matched_trk:
                continue
            info = self.tracks[k]
            s, q = where[k]
            merge_into = [r for r, _ in continuing if overlap[r, c] > split_threshold]
            if merge_into:
                r = max(merge_into, key=lambda r: (overlap[r, c], -r))
                target = tracks[matched_pos[r]]
                self.tracks[k] = dataclasses.replace(info, merged_into=target, ended=pp.period)
                self.links.append(link("merge", r, c, new_track=target))
            elif t - s > max_gap:
                first_missing = self.periods[s + 1].period
                self.tracks[k] = dataclasses.replace(info, ended=first_missing)
                self.links.append(
                    Link(self.periods[s].period, first_missing, k, None, q, None,
                         np.nan, np.nan, np.nan, "end")
                )
        self.assignment[pp.period] = assign

    # -- similarities ------------------------------------------------------
    def _overlap(self, t, positions, tracks, where) -> np.ndarray:
        """Jaccard overlap of positions now with tracks where last seen (common actors)."""
        out = np.zeros((len(positions), len(tracks)))
        if not positions or not tracks:
            return out
        pp = self.periods[t]
        row_of = np.full(pp.n_positions, -1)
        row_of[positions] = np.arange(len(positions))
        by_period: dict[int, list[int]] = {}
        for c, k in enumerate(tracks):
            by_period.setdefault(where[k][0], []).append(c)
        for s, cs in by_period.items():
            ps = self.periods[s]
            index_s = self._actors(s)
            idx = np.fromiter((index_s.get(a, -1) for a in pp.actors), dtype=np.int64, count=len(pp.actors))
            common = idx >= 0
            lt = pp.labels[common]
            ls = ps.labels[idx[common]]
            cont = np.zeros((pp.n_positions, ps.n_positions))
            np.add.at(cont, (lt, ls), 1.0)
            # Isolates belong to no ordinary position: they count in neither size.
            if pp.isolates is not None:
                cont[pp.isolates] = 0
            if ps.isolates is not None:
                cont[:, ps.isolates] = 0
            size_t = np.bincount(lt, minlength=pp.n_positions).astype(float)
            size_s = np.bincount(ls, minlength=ps.n_positions).astype(float)
            union = size_t[:, None] + size_s[None, :] - cont
            jac = np.divide(cont, union, out=np.zeros_like(cont), where=union > 0)
            for c in cs:
                q = where[tracks[c]][1]
                out[:, c] = jac[positions, q]
        return out

    def _role(self, t, positions, tracks, where, provisional) -> np.ndarray:
        """Role similarity 1 - mean |d_p - d_k| over track-indexed density entries."""
        role = np.full((len(positions), len(tracks)), np.nan)
        pp = self.periods[t]
        if pp.density is None or not positions or not tracks:
            return role
        dens_t = _scaled(pp.density, pp.isolates)
        # Position -> track at t (provisional) and at each earlier period (final).
        track_of_t = {p: provisional.get(p) for p in positions}
        for c, k in enumerate(tracks):
            s, q = where[k]
            ps = self.periods[s]
            if ps.density is None or ps.density.shape[0] != pp.density.shape[0]:
                continue
            dens_s = _scaled(ps.density, ps.isolates)
            assign_s = self.assignment[ps.period]
            pos_s = {
                int(assign_s[j]): j
                for j in range(ps.n_positions)
                if assign_s[j] > ISOLATES_TRACK and j != q
            }
            for r, p in enumerate(positions):
                own = track_of_t[p]
                pos_t = {
                    track_of_t[j]: j for j in positions if j != p and track_of_t[j] is not None
                }
                shared = [u for u in pos_t if u in pos_s and u != k and u != own]
                jt = [pos_t[u] for u in shared]
                js = [pos_s[u] for u in shared]
                parts = [np.abs(dens_t[:, p, p] - dens_s[:, q, q])]
                if shared:
                    parts.append(np.abs(dens_t[:, p, jt] - dens_s[:, q, js]).ravel())
                    parts.append(np.abs(dens_t[:, jt, p] - dens_s[:, js, q]).ravel())
                role[r, c] = 1.0 - float(np.mean(np.concatenate(parts)))
        return role


def _scaled(density: np.ndarray, isolates: int | None) -> np.ndarray:
    """Densities divided by the largest ordinary block density of each relation."""
    dens = np.nan_to_num(np.asarray(density, dtype=np.float64))
    keep = np.ones(dens.shape[1], dtype=bool)
    if isolates is not None:
        keep[isolates] = False
    top = dens[:, keep][:, :, keep].max(axis=(1, 2)) if keep.any() else np.zeros(dens.shape[0])
    top = np.where(top > 0, top, 1.0)
    return dens / top[:, None, None]
