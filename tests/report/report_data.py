"""A small, consistent set of report tables shaped like those of tracker.api.

Ties are drawn at random per period; blocks, summary and moves are then
computed from them by definition (density = ties / possible, Wasserman & Faust
1994, sec. 10.2), so the tables agree with each other the way real ones do.
Two actor labels are hostile on purpose (markup and a script terminator).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

HOSTILE = "<img src=x onerror=alert(1)>"
CLOSER = "</script><b>bold</b>"
PERIODS = ["2019", "2020", "2021", "2022"]
ACTORS = [
    "Harbour Board",
    "Coast Watch",
    "Fire Service",
    "Water Board",
    "Tide Lab",
    HOSTILE,
    CLOSER,
    "Rescue & Relief",
    "Ferry Office",
]

# track of each actor in each period (None = absent); track 3 is born in 2021
# when two actors move into it; Ferry Office enters in 2020.
PLAN = {
    "Harbour Board": [1, 1, 1, 1],
    "Coast Watch": [1, 1, 1, 1],
    "Fire Service": [1, 1, 3, 3],
    "Water Board": [2, 2, 3, 3],
    "Tide Lab": [2, 2, 2, 2],
    HOSTILE: [2, 0, 2, 2],
    CLOSER: [0, 0, 0, 1],
    "Rescue & Relief": [1, 2, 2, 2],
    "Ferry Office": [None, 2, 2, 2],
}


def make_tables(seed: int = 3):
    rng = np.random.default_rng(seed)
    member_rows, block_rows, summary_rows = [], [], []
    diag_rows, perm_rows, struct_rows = [], [], []
    for p, period in enumerate(PERIODS):
        present = [a for a in ACTORS if PLAN[a][p] is not None]
        track = np.array([PLAN[a][p] for a in present])
        # positions are numbered per period in an order unrelated to tracks
        # (label switching), so charts must sort by track
        distinct = sorted(set(track.tolist()), reverse=True)
        position = np.array([distinct.index(t) + 1 for t in track])
        n = len(present)
        same = track[:, None] == track[None, :]
        prob = np.where(same & (track[:, None] > 0), 0.8, 0.1)
        prob[track == 0, :] = 0.0
        prob[:, track == 0] = 0.0
        adj = (rng.random((n, n)) < prob).astype(int)
        np.fill_diagonal(adj, 0)
        for i, actor in enumerate(present):
            member_rows.append(
                dict(period=period, actor=actor, position=int(position[i]), track=int(track[i]),
                     isolate=bool(track[i] == 0),
                     confidence=float(np.round(rng.uniform(0.3, 1.0), 2)) if p else np.nan)
            )
        for k in sorted(set(position.tolist())):
            for l in sorted(set(position.tolist())):
                rows, cols = position == k, position == l
                nk, nl = rows.sum(), cols.sum()
                possible = nk * (nk - 1) if k == l else nk * nl
                ties = int(adj[np.ix_(rows, cols)].sum())
                density = ties / possible if possible else 0.0
                block_rows.append(
                    dict(period=period, relation="aid", from_position=k, to_position=l,
                         from_track=int(track[rows][0]), to_track=int(track[cols][0]),
                         ties=ties, possible=int(possible), density=density,
                         mean_value=density, max_value=float(ties > 0), image=int(ties > 0))
                )
        ties = int(adj.sum())
        isolates = int(((adj.sum(0) + adj.sum(1)) == 0).sum())
        summary_rows.append(
            dict(period=period, relation="aid", actors=n, ties=ties,
                 density=ties / (n * (n - 1)), reciprocity=float(rng.uniform()),
                 isolates=isolates, mean_value=ties / (n * (n - 1)))
        )
        for k in (2, 3, 4):
            diag_rows.append(dict(period=period, k=k, inconsistencies=int(rng.integers(2, 20)),
                                  density_correlation=float(rng.uniform(0.2, 0.9)),
                                  chosen=(k == 3)))
        perm_rows.append(dict(period=period, observed=float(rng.uniform(0.3, 0.9)),
                              p_value=float(rng.choice([0.01, 0.2]))))
        for ideal in ("cohesive subgroups", "core-periphery"):
            struct_rows.append(dict(period=period, relation="aid", ideal=ideal,
                                    mismatches=int(rng.integers(0, 6)),
                                    fit=float(rng.uniform(0.4, 1.0)),
                                    p_value=float(rng.choice([0.01, 0.3])),
                                    roles=f"core: T1; periphery: T2"))
    memberships = pd.DataFrame(member_rows)
    wide = memberships.pivot(index="actor", columns="period", values="track")
    move_rows, trans_rows = [], []
    for a, b in zip(PERIODS[:-1], PERIODS[1:]):
        both = wide[[a, b]].dropna()
        for actor, (ta, tb) in both.iterrows():
            if ta != tb:
                conf = memberships.loc[(memberships.actor == actor) & (memberships.period == b),
                                       "confidence"].iloc[0]
                move_rows.append(dict(actor=actor, from_period=a, to_period=b,
                                      from_track=int(ta), to_track=int(tb), confidence=conf))
        counts = both.groupby([a, b]).size()
        total = counts.groupby(level=0).transform("sum")
        for (ta, tb), c in counts.items():
            trans_rows.append(dict(from_period=a, to_period=b, from_track=int(ta),
                                   to_track=int(tb), count=int(c),
                                   share=float(c / total[(ta, tb)])))
    tracks = pd.DataFrame(
        [
            dict(track=0, name="", first_period="2019", last_period="2022", kind="", parent=""),
            dict(track=1, name="", first_period="2019", last_period="2022", kind="continuation",
                 parent=""),
            dict(track=2, name="", first_period="2019", last_period="2022", kind="continuation",
                 parent=""),
            dict(track=3, name="joint response", first_period="2021", last_period="2022",
                 kind="split", parent="T1"),
        ]
    )
    tables = {
        "summary": pd.DataFrame(summary_rows),
        "memberships": memberships,
        "blocks": pd.DataFrame(block_rows),
        "moves": pd.DataFrame(move_rows),
        "transitions": pd.DataFrame(trans_rows),
        "tracks": tracks,
        "structures": pd.DataFrame(struct_rows),
        "diagnostics": pd.DataFrame(diag_rows),
        "permutation": pd.DataFrame(perm_rows),
    }
    meta = dict(
        method="structural", criterion="zero-block", alpha=None, cut=1, seed=7, positions=3,
        version="0.1.0", created="2024-01-02T03:04:05", study=f"Demo {HOSTILE}",
        relations=["aid"], counts={"events": 321, "actors": len(ACTORS), "periods": 4},
    )
    return tables, list(PERIODS), meta
