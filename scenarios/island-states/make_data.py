"""Generate the invented island-states data set (events.csv, actors.csv).

Twenty-two fictional states of the Veshan Archipelago and 34 years
(1984-2017) of directed events of two kinds, ``cooperation`` and ``dispute``.
Every name is made up.

The planted story:

* 1984-1999, a core-periphery order: five core states cooperate with each
  other and with everyone; the periphery cooperates with the core, hardly
  with itself;
* 2000-2003, the core splits; by 2004 there are two blocs, each with part of
  the old core and part of the periphery, cooperating inside the bloc and in
  dispute across it;
* Ostrevia becomes independent in 1994 (absent before, not isolated) and joins
  the second bloc; Lumaro is absorbed after 2009 (absent after).

Old archive entries give only the year (``1987``); from 1995 events carry a
full ISO date (``1996-03-14``), as dates do in many event data sets.

Events are Poisson counts per ordered pair and year with a rate set by the two
states' positions (a stochastic blockmodel, Holland, Laskey & Leinhardt 1983),
blended linearly between the two orders over the transition years.

Run ``python make_data.py [folder]``; the same seed gives the same files, byte
for byte.
"""

from __future__ import annotations

import csv
import sys
from datetime import date, timedelta
from pathlib import Path

import numpy as np

SEED = 19840101
YEARS = list(range(1984, 2018))
FULL_DATES_FROM = 1995
SPLIT_START, SPLIT_END = 2000, 2004  # order 1 until SPLIT_START, order 2 from SPLIT_END

# name, old role (core / periphery), later bloc (A / B), first year, last year
STATES = [
    ("Astoveni", "core", "A", 1984, 2017),
    ("Bellurai", "core", "A", 1984, 2017),
    ("Corvanth", "core", "A", 1984, 2017),
    ("Dasmirel", "core", "B", 1984, 2017),
    ("Elutha", "core", "B", 1984, 2017),
    ("Fenwaro", "periphery", "A", 1984, 2017),
    ("Gallisande", "periphery", "A", 1984, 2017),
    ("Harrowen", "periphery", "A", 1984, 2017),
    ("Isquavel", "periphery", "A", 1984, 2017),
    ("Jorrenti", "periphery", "A", 1984, 2017),
    ("Kestavo", "periphery", "A", 1984, 2017),
    ("Lumaro", "periphery", "A", 1984, 2009),
    ("Mirrasca", "periphery", "B", 1984, 2017),
    ("Nuvelle", "periphery", "B", 1984, 2017),
    ("Ombrith", "periphery", "B", 1984, 2017),
    ("Pellusk", "periphery", "B", 1984, 2017),
    ("Quorvane", "periphery", "B", 1984, 2017),
    ("Rethalos", "periphery", "B", 1984, 2017),
    ("Sabrevin", "periphery", "B", 1984, 2017),
    ("Tulliskar", "periphery", "B", 1984, 2017),
    ("Undarell", "periphery", "A", 1984, 2017),
    ("Ostrevia", "periphery", "B", 1994, 2017),
]

# Expected events per ordered pair (sender, receiver) per year.
OLD_ORDER = {  # (sender is core, receiver is core)
    "cooperation": {(True, True): 0.55, (True, False): 0.10, (False, True): 0.14,
                    (False, False): 0.008},
    "dispute": {(True, True): 0.01, (True, False): 0.025, (False, True): 0.01,
                (False, False): 0.008},
}
NEW_ORDER = {  # (same bloc, either was core)
    "cooperation": {(True, True): 0.30, (True, False): 0.16, (False, True): 0.01,
                    (False, False): 0.006},
    "dispute": {(True, True): 0.005, (True, False): 0.005, (False, True): 0.10,
                (False, False): 0.07},
}


def rates(kind: str, core: np.ndarray, bloc: np.ndarray, year: int) -> np.ndarray:
    """n x n expected counts for one kind of event in one year."""
    old_table, new_table = OLD_ORDER[kind], NEW_ORDER[kind]
    old = np.empty((len(core), len(core)))
    new = np.empty_like(old)
    same = bloc[:, None] == bloc[None, :]
    either_core = core[:, None] | core[None, :]
    for (a, b), value in old_table.items():
        old[np.ix_(core == a, core == b)] = value
    for (a, b), value in new_table.items():
        new[(same == a) & (either_core == b)] = value
    w = np.clip((year - SPLIT_START) / (SPLIT_END - SPLIT_START), 0.0, 1.0)
    out = (1.0 - w) * old + w * new
    np.fill_diagonal(out, 0.0)
    return out


def make(folder: Path, seed: int = SEED) -> None:
    rng = np.random.default_rng(seed)
    names = np.array([s[0] for s in STATES])
    core = np.array([s[1] == "core" for s in STATES])
    bloc = np.array([s[2] for s in STATES])
    rows = []
    for year in YEARS:
        present = np.array([s[3] <= year <= s[4] for s in STATES])
        alive = present[:, None] & present[None, :]
        for kind in ("cooperation", "dispute"):
            counts = rng.poisson(rates(kind, core, bloc, year) * alive)
            senders, receivers = np.nonzero(counts)
            for i, j in zip(senders, receivers):
                for _ in range(counts[i, j]):
                    if year < FULL_DATES_FROM:
                        when = str(year)
                    else:
                        day = date(year, 1, 1) + timedelta(days=int(rng.integers(0, 365)))
                        when = day.isoformat()
                    rows.append((names[i], names[j], when, kind))
    rows.sort(key=lambda r: (r[2][:4], r[2], r[3], r[0], r[1]))
    folder.mkdir(parents=True, exist_ok=True)
    write_csv(folder / "events.csv", ("state_from", "state_to", "date", "kind"), rows)
    write_csv(
        folder / "actors.csv",
        ("actor", "first_year", "last_year", "region"),
        [(s[0], s[3], s[4], "north" if s[2] == "A" else "south") for s in STATES],
    )


def write_csv(path: Path, header: tuple[str, ...], rows: list[tuple]) -> None:
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


if __name__ == "__main__":
    make(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent)
