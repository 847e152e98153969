"""Generate the invented coastal-agencies data set (events.csv, actors.csv).

Public agencies of the Orrin Coast, a fictional region, and fourteen years
(2008-2021) of dated cooperation events of three kinds. Every name is made up.

The planted story, which a good analysis should find:

* from 2008 the agencies sit in four positions: emergency responders (who
  exercise together and give each other mutual aid), science and monitoring
  offices (who share data), municipal offices (who ask the responders for aid)
  and port and transport offices (who join the responders' exercises);
* the Orrin Coastal Resilience Office is founded in 2014 (it does not exist
  before, so it is absent, not isolated) and from 2015 pulls five agencies,
  one or two a year, into a new position of its own;
* the Emberlee Flood Wardens start in 2011 and the Saltvarre Village Board is
  wound up after 2016.

Events are drawn as Poisson counts per pair of agencies and year, with a rate
that depends only on the two agencies' positions (a stochastic blockmodel,
Holland, Laskey & Leinhardt 1983), so each year's network is sparse.

Run ``python make_data.py [folder]``; the same seed gives the same files, byte
for byte.
"""

from __future__ import annotations

import csv
import sys
from datetime import date, timedelta
from pathlib import Path

import numpy as np

SEED = 20240611
YEARS = list(range(2008, 2022))
KINDS = ("joint-exercise", "mutual-aid", "data-sharing")

# name, sector, starting position, first year, last year
AGENCIES = [
    ("Orrin Coast Fire and Rescue", "emergency", "E", 2008, 2021),
    ("Halvek Harbour Police", "emergency", "E", 2008, 2021),
    ("Orrin Coastguard Station", "emergency", "E", 2008, 2021),
    ("Quenport Ambulance Service", "emergency", "E", 2008, 2021),
    ("Saltvarre Lifeboat Crew", "emergency", "E", 2008, 2021),
    ("Wendmouth Civil Defence Unit", "emergency", "E", 2008, 2021),
    ("Coriss Bay Harbour Master", "emergency", "E", 2008, 2021),
    ("Orrin Marine Survey", "science", "S", 2008, 2021),
    ("Tamsel Point Tide Observatory", "science", "S", 2008, 2021),
    ("Quenport Water Board", "science", "S", 2008, 2021),
    ("Saltvarre Dune Trust", "science", "S", 2008, 2021),
    ("Orrin Fisheries Inspectorate", "science", "S", 2008, 2021),
    ("Halvek Weather Office", "science", "S", 2008, 2021),
    ("Drayle Estuary Laboratory", "science", "S", 2008, 2021),
    ("Halvek Town Council", "municipal", "M", 2008, 2021),
    ("Quenport Borough Office", "municipal", "M", 2008, 2021),
    ("Wendmouth Parish Council", "municipal", "M", 2008, 2021),
    ("Coriss Bay Council", "municipal", "M", 2008, 2021),
    ("Saltvarre Village Board", "municipal", "M", 2008, 2016),
    ("Drayle County Roads Office", "municipal", "M", 2008, 2021),
    ("Orrin Public Health Office", "municipal", "M", 2008, 2021),
    ("Emberlee Schools Office", "municipal", "M", 2008, 2021),
    ("Emberlee Flood Wardens", "municipal", "M", 2011, 2021),
    ("Quenport Port Authority", "transport", "P", 2008, 2021),
    ("Orrin Ferry Office", "transport", "P", 2008, 2021),
    ("Halvek Rail and Bus Office", "transport", "P", 2008, 2021),
    ("Tamsel Point Marina Office", "transport", "P", 2008, 2021),
    ("Wendmouth Freight Depot", "transport", "P", 2008, 2021),
    ("Orrin Coastal Resilience Office", "coordination", "R", 2014, 2021),
]

# agency -> first year in the new resilience position "R"
JOINS_R = {
    "Orrin Coastal Resilience Office": 2014,
    "Orrin Marine Survey": 2015,
    "Halvek Town Council": 2015,
    "Emberlee Flood Wardens": 2015,
    "Tamsel Point Tide Observatory": 2016,
    "Wendmouth Parish Council": 2017,
}

POSITIONS = ("E", "S", "M", "P", "R")

# Expected events per pair of agencies per year, by kind and pair of positions
# (symmetric: cooperation between two agencies, either may be named first).
NOISE = 0.004
RATES = {
    "joint-exercise": {("E", "E"): 0.45, ("E", "P"): 0.22, ("E", "M"): 0.04, ("P", "P"): 0.10,
                       ("S", "S"): 0.04, ("R", "R"): 0.45, ("E", "R"): 0.12},
    "mutual-aid": {("E", "E"): 0.40, ("E", "M"): 0.18, ("E", "P"): 0.08, ("M", "M"): 0.03},
    "data-sharing": {("S", "S"): 0.42, ("S", "M"): 0.07, ("E", "E"): 0.05, ("R", "R"): 0.50,
                     ("R", "S"): 0.12, ("R", "M"): 0.08},
}


def position_in(agency: str, home: str, year: int) -> str:
    joined = JOINS_R.get(agency)
    return "R" if joined is not None and year >= joined else home


def rate_matrix(kind: str) -> np.ndarray:
    index = {p: i for i, p in enumerate(POSITIONS)}
    rates = np.full((len(POSITIONS), len(POSITIONS)), NOISE)
    for (a, b), value in RATES[kind].items():
        rates[index[a], index[b]] = rates[index[b], index[a]] = value
    return rates


def make(folder: Path, seed: int = SEED) -> None:
    rng = np.random.default_rng(seed)
    names = [a[0] for a in AGENCIES]
    index = {p: i for i, p in enumerate(POSITIONS)}
    upper = np.triu_indices(len(names), k=1)
    rows = []
    for year in YEARS:
        present = np.array([a[3] <= year <= a[4] for a in AGENCIES])
        block = np.array([index[position_in(a[0], a[2], year)] for a in AGENCIES])
        alive = present[upper[0]] & present[upper[1]]
        for kind in KINDS:
            rates = rate_matrix(kind)[block[upper[0]], block[upper[1]]]
            if year == 2014 and kind == "data-sharing":
                # the new office's first year: first contacts with the
                # agencies it will draw in
                office = names.index("Orrin Coastal Resilience Office")
                future = np.isin(np.arange(len(names)), [names.index(a) for a in JOINS_R])
                touches = ((upper[0] == office) & future[upper[1]]) | (
                    (upper[1] == office) & future[upper[0]]
                )
                rates = np.where(touches, 0.6, rates)
            counts = rng.poisson(rates * alive)
            for pair in np.flatnonzero(counts):
                i, j = upper[0][pair], upper[1][pair]
                for _ in range(counts[pair]):
                    a, b = (i, j) if rng.random() < 0.5 else (j, i)
                    day = date(year, 1, 1) + timedelta(days=int(rng.integers(0, 365)))
                    rows.append((names[a], names[b], day.isoformat(), kind))
    rows.sort(key=lambda r: (r[2], r[3], r[0], r[1]))
    folder.mkdir(parents=True, exist_ok=True)
    write_csv(folder / "events.csv", ("agency_from", "agency_to", "event_date", "kind"), rows)
    write_csv(
        folder / "actors.csv",
        ("actor", "first_period", "last_period", "sector"),
        [(a[0], a[3], a[4], a[1]) for a in AGENCIES],
    )


def write_csv(path: Path, header: tuple[str, ...], rows: list[tuple]) -> None:
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


if __name__ == "__main__":
    make(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent)
