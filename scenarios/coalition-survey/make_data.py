"""Generate the invented coalition-survey data set (ratings.csv, actors.csv).

The Pellbrook Community Partnership, a fictional coalition of 24
organisations, surveys its members in five waves. Each member rates how often
it works with every other member: 0 never, 1 rarely, 2 sometimes, 3 often,
4 all the time. Every name is made up.

The planted story (the coalition "matures"):

* wave 1: a founding core of six rates itself 3-4; service providers work with
  the core sometimes; five outlying members are barely connected;
* from wave 2 three of the outlying members are drawn into the core, one step
  a wave; two stay outside;
* from wave 3 four service providers and one founder form a health working
  group that rates itself 4;
* two members join in wave 2 and one in wave 3 (absent before, not isolated);
  one member leaves after wave 4.

A rating is the block's mean for the pair's positions in that wave plus noise,
rounded and clipped to 0-4 (a valued stochastic blockmodel; see Nowicki &
Snijders 2001 for the model family). Every responding member rates every other
member present, zeros included, as a survey export would.

Run ``python make_data.py [folder]``; the same seed gives the same files, byte
for byte.
"""

from __future__ import annotations

import csv
import sys
from pathlib import Path

import numpy as np

SEED = 5150
WAVES = [1, 2, 3, 4, 5]
NOISE_SD = 0.6

# name, kind, group in wave 1, first wave, last wave
MEMBERS = [
    ("Pellbrook Neighbourhood Trust", "founder", "core", 1, 5),
    ("Pellbrook Tenants Association", "founder", "core", 1, 5),
    ("Riverside Ward Food Bank", "founder", "core", 1, 5),
    ("Pellbrook Volunteer Centre", "founder", "core", 1, 5),
    ("Old Mill Community Hall", "founder", "core", 1, 5),
    ("Pellbrook Family Clinic", "founder", "core", 1, 5),
    ("Northgate Youth Club", "service", "service", 1, 5),
    ("Pellbrook Adult Learning Hub", "service", "service", 1, 5),
    ("Canal Side Counselling", "service", "service", 1, 5),
    ("Pellbrook Home Care Network", "service", "service", 1, 5),
    ("Eastfield Elders Circle", "service", "service", 1, 5),
    ("Pellbrook Debt Advice Desk", "service", "service", 1, 5),
    ("Brickworks Health Visitors", "service", "service", 1, 5),
    ("Pellbrook Carers Forum", "service", "service", 1, 5),
    ("Southgate Allotment Society", "outlying", "outer", 1, 5),
    ("Pellbrook Reading Circle", "outlying", "outer", 1, 5),
    ("Millpond Arts Collective", "outlying", "outer", 1, 5),
    ("Pellbrook Cycling Club", "outlying", "outer", 1, 5),
    ("Chapel Lane Repair Cafe", "outlying", "outer", 1, 4),
    ("Pellbrook Language Exchange", "newcomer", "service", 2, 5),
    ("Weir Street Pantry", "newcomer", "service", 2, 5),
    ("Pellbrook Walking Group", "newcomer", "outer", 3, 5),
    ("Hillcrest Parents Network", "outlying", "outer", 1, 5),
    ("Pellbrook Legal Clinic", "service", "service", 1, 5),
]

# member -> wave from which it belongs to the core
JOINS_CORE = {
    "Southgate Allotment Society": 2,
    "Millpond Arts Collective": 3,
    "Hillcrest Parents Network": 4,
}
# members of the health working group from wave 3
HEALTH_GROUP = {
    "Pellbrook Family Clinic",
    "Canal Side Counselling",
    "Pellbrook Home Care Network",
    "Brickworks Health Visitors",
    "Pellbrook Carers Forum",
}
HEALTH_FROM = 3

GROUPS = ("core", "service", "outer", "health")
# Mean rating from the row group to the column group.
MEANS = np.array(
    [
        # core  service outer health
        [3.4, 1.6, 0.6, 2.0],  # core
        [2.3, 1.2, 0.3, 1.4],  # service
        [0.8, 0.3, 0.2, 0.3],  # outer
        [2.2, 1.4, 0.3, 3.8],  # health
    ]
)


def group_in(member: tuple, wave: int) -> str:
    name, _, group, _, _ = member
    if name in HEALTH_GROUP and wave >= HEALTH_FROM:
        return "health"
    if name in JOINS_CORE and wave >= JOINS_CORE[name]:
        return "core"
    return group


def make(folder: Path, seed: int = SEED) -> None:
    rng = np.random.default_rng(seed)
    index = {g: i for i, g in enumerate(GROUPS)}
    rows = []
    for wave in WAVES:
        present = [m for m in MEMBERS if m[3] <= wave <= m[4]]
        names = [m[0] for m in present]
        group = np.array([index[group_in(m, wave)] for m in present])
        mean = MEANS[group[:, None], group[None, :]]
        rating = np.clip(np.rint(mean + rng.normal(0.0, NOISE_SD, mean.shape)), 0, 4).astype(int)
        raters, partners = np.nonzero(~np.eye(len(names), dtype=bool))
        rows.extend(
            (names[i], names[j], wave, int(rating[i, j])) for i, j in zip(raters, partners)
        )
    folder.mkdir(parents=True, exist_ok=True)
    write_csv(folder / "ratings.csv", ("rater", "partner", "wave", "rating"), rows)
    write_csv(
        folder / "actors.csv",
        ("actor", "first_wave", "last_wave", "kind"),
        [(m[0], m[3], m[4], m[1]) for m in MEMBERS],
    )


def write_csv(path: Path, header: tuple[str, ...], rows: list[tuple]) -> None:
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


if __name__ == "__main__":
    make(Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).resolve().parent)
