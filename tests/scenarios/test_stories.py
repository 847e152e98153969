"""Each demo scenario's planted story, found by the default demo pipeline.

The stories are planted by each scenario's ``make_data.py`` (the truth; the
README retells them).  The pipeline is the demo's: import, the scenario's
default fit (``scenario.json``: the dynamic blockmodel), align, except that
``align`` runs with ``draws=0``, so a move is reported where the model's own
posterior change probability is >= 0.5 (no simulated studies; keeps the test
fast).  The demo itself calibrates that probability on studies simulated from
the fit, which can leave a planted move below 0.5 and list it as uncertain
(coastal scenario: Wendmouth Parish Council's 2017 move, about 0.46, in
``export uncertain-changes``).  Checked: movers with their exact periods,
births of new tracks, and that no move reported at confidence >= 0.8 is false.
"""

from __future__ import annotations

import pandas as pd
import pytest

from tracker.api import Study
from tracker.demo import load_scenario


def _demo(name: str, tmp_path) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    folder, spec = load_scenario(name)
    with Study(tmp_path / f"{name}.db") as study:
        study.import_events(
            folder / spec["events"], source=spec["source"], target=spec["target"], date=spec.get("date"),
            period_column=spec.get("period_column"), period=spec.get("period") or "year",
            relation=spec.get("relation"), relation_name=spec.get("relation_name"), weight=spec.get("weight"),
            undirected=bool(spec.get("undirected")),
        )
        study.import_actors(folder / spec["roster"], actor=spec["roster_actor"], first=spec["roster_first"],
                            last=spec["roster_last"])
        fit = spec["fit"]
        study.fit(method=fit["method"], positions=fit["positions"], criterion=fit["criterion"], seed=fit["seed"],
                  draws=0)
        aligned = study.align(draws=0)
        return aligned["tracks"], aligned["moves"], study.memberships()


def _moved(moves: pd.DataFrame) -> dict:
    return {a: str(t) for a, t in zip(moves["actor"], moves["to_period"])}


@pytest.fixture(scope="module")
def coastal(tmp_path_factory):
    return _demo("coastal-agencies", tmp_path_factory.mktemp("coastal"))


#: planted in scenarios/coastal-agencies/make_data.py (JOINS_R): the office is founded in
#: 2014; Orrin Marine Survey, Halvek Town Council and Emberlee Flood Wardens join its
#: position in 2015, Tamsel Point Tide Observatory in 2016, Wendmouth Parish Council in 2017
COASTAL_MOVES = {"Orrin Marine Survey": "2015", "Halvek Town Council": "2015", "Emberlee Flood Wardens": "2015",
                 "Tamsel Point Tide Observatory": "2016", "Wendmouth Parish Council": "2017"}


def _new_track(tracks, members, founder):
    office = members[members["actor"] == founder]
    new_track = int(office.loc[office["period"] == office["period"].max(), "track"].iloc[0])
    return new_track, tracks.set_index("track").loc[new_track, "first_period"], office


def test_coastal_agencies_story(coastal):
    tracks, moves, members = coastal
    new_track, born, office = _new_track(tracks, members, "Orrin Coastal Resilience Office")
    assert str(office["period"].min()) == "2014"  # absent before it exists: no membership, no move
    assert (office["track"] == new_track).all()  # it founds the new position and stays there
    assert str(born) == "2014"  # the new track is born with the office
    # every reported move is a recruit joining the new track, once; no other actor moves
    assert (moves["to_track"] == new_track).all()
    assert moves["actor"].is_unique
    assert set(moves["actor"]) == set(COASTAL_MOVES)
    found = _moved(moves)
    for actor, period in COASTAL_MOVES.items():
        if actor != "Halvek Town Council":
            assert found[actor] == period, (actor, found[actor])
    confident = moves[moves["confidence"] >= 0.8]
    assert set(confident["actor"]) <= set(COASTAL_MOVES)


@pytest.mark.xfail(strict=True, reason=(
    "Halvek Town Council's 2014 ties (a data-sharing event with the new office, three joint exercises "
    "with responders, no mutual aid) favour the new position over the municipal one by about 5.8 nats at "
    "the fitted parameters (odds about 340:1, other actors held at their posteriors), so the model dates its move 2014; the story "
    "plants 2015 (README: 'its move may be dated 2014')"))
def test_coastal_agencies_halvek_is_dated_as_planted(coastal):
    tracks, moves, members = coastal
    assert _moved(moves).get("Halvek Town Council") == COASTAL_MOVES["Halvek Town Council"]


def test_coalition_survey_story(tmp_path):
    # planted in scenarios/coalition-survey/make_data.py: Southgate Allotment Society joins the
    # core in wave 2, Millpond Arts Collective in wave 3, Hillcrest Parents Network in wave 4;
    # the health working group forms in wave 3 from five members of other positions (their
    # moves are 2 -> 3, into a position born in wave 3)
    tracks, moves, members = _demo("coalition-survey", tmp_path)
    group = ["Pellbrook Family Clinic", "Canal Side Counselling", "Pellbrook Home Care Network",
             "Brickworks Health Visitors", "Pellbrook Carers Forum"]
    planted = {"Southgate Allotment Society": "2", "Millpond Arts Collective": "3",
               "Hillcrest Parents Network": "4", **{a: "3" for a in group}}
    # exactly the planted moves, each at its planted wave, and no other
    assert moves["actor"].is_unique
    assert _moved(moves) == planted
    wave3 = members[(members["period"].astype(str) == "3") & members["actor"].isin(group)]
    assert wave3["track"].nunique() == 1  # one position for the whole group
    group_track = int(wave3["track"].iloc[0])
    assert str(tracks.set_index("track").loc[group_track, "first_period"]) == "3"  # born with the group
    assert (moves.loc[moves["actor"].isin(group), "to_track"] == group_track).all()
    confident = moves[moves["confidence"] >= 0.8]
    assert set(confident["actor"]) <= set(planted)


def test_island_states_story(tmp_path):
    # planted in scenarios/island-states/make_data.py: a core-periphery order until 1999, the
    # core splits in 2000-2003 into a northern bloc (Astoveni, Bellurai, Corvanth) and a
    # southern bloc (Dasmirel, Elutha), each taking part of the periphery
    tracks, moves, members = _demo("island-states", tmp_path)
    late = members[members["period"] == members["period"].max()].set_index("actor")["track"]
    north, south = late[["Astoveni", "Bellurai", "Corvanth"]], late[["Dasmirel", "Elutha"]]
    assert north.nunique() == 1 and south.nunique() == 1 and north.iloc[0] != south.iloc[0]
    early = members[members["period"] == "1996-1997"].set_index("actor")["track"]
    core = early[["Astoveni", "Bellurai", "Corvanth", "Dasmirel", "Elutha"]]
    assert core.nunique() == 1  # one core before the split
    # every move falls in the split years, none before 2000 or after 2007
    starts = moves["to_period"].astype(str).str[:4].astype(int)
    assert starts.between(2000, 2007).all()
    # the periphery divides between the two blocs
    periphery = late.drop(["Astoveni", "Bellurai", "Corvanth", "Dasmirel", "Elutha"], errors="ignore")
    assert {north.iloc[0], south.iloc[0]} <= set(periphery)
