"""Plain-language sentences, checked on small hand-made histories.

Every expected sentence below was worked out by hand from the tables it
describes.
"""

from __future__ import annotations

import pandas as pd

from tracker.report.narrative import describe_changes, is_low_confidence, moves_from_memberships

PERIODS = ["spring", "summer", "autumn"]  # not in lexical order on purpose


def _memberships(plan: dict[str, list[int | None]]) -> pd.DataFrame:
    rows = [
        dict(period=p, actor=a, track=t)
        for a, tracks in plan.items()
        for p, t in zip(PERIODS, tracks)
        if t is not None
    ]
    return pd.DataFrame(rows)


PLAN = {
    "x": [1, 1, 1],
    "y": [1, 2, 2],  # moves into T2 between spring and summer
    "z": [None, 2, 2],  # enters in summer
    "w": [2, 2, None],  # gone after summer
    "v": [2, 0, 0],  # loses all ties
}


def test_moves_entries_exits_read_off_memberships():
    sentences = describe_changes({"memberships": _memberships(PLAN)}, PERIODS)
    assert sentences == [
        "The study follows 5 actors over 3 periods, from spring to autumn.",
        "In summer, z enters the study, in T2.",
        "Between spring and summer, v lost all ties (was in T2).",
        "Between spring and summer, y moved into T2 (from T1).",
        "After summer, w is no longer present.",
        "Across 2 steps there were 2 moves by 2 actors; the most change came between spring "
        "and summer (2 moves).",
    ]


def test_moves_from_memberships_uses_the_period_order():
    moves = moves_from_memberships(_memberships(PLAN), PERIODS)
    got = sorted(zip(moves["actor"], moves["from_period"], moves["to_period"],
                     moves["from_track"], moves["to_track"]))
    assert got == [("v", "spring", "summer", 2, 0), ("y", "spring", "summer", 1, 2)]


def test_low_confidence_moves_are_named_not_hidden():
    moves = pd.DataFrame(
        dict(actor=["p", "q", "r"], from_period=["spring"] * 3, to_period=["summer"] * 3,
             from_track=[1, 1, 2], to_track=[3, 3, 3], confidence=[0.3, 0.9, float("nan")])
    )
    tracks = pd.DataFrame(dict(track=[1, 2, 3], name=["", "", "harbour group"],
                               first_period=["spring", "spring", "summer"],
                               last_period=["autumn", "summer", "autumn"],
                               kind=["", "", "merge"], parent=["", "", "T1 and T2"]))
    sentences = describe_changes({"moves": moves, "tracks": tracks}, PERIODS)
    assert "Track T1 runs through the whole study." in sentences
    assert "Track T2 is last seen in summer." in sentences
    assert "Track harbour group (T3) appears in summer, formed by merging T1 and T2." in sentences
    assert ("Between spring and summer, p, q and r moved into harbour group (from T1 and T2). "
            "Low confidence, possibly noise: p (0.30).") in sentences
    assert sentences[-1].endswith("1 of the moves has a confidence below 0.5 and may be noise.")
    stricter = describe_changes({"moves": moves}, PERIODS, low_confidence=0.95)
    assert "p (0.30) and q (0.90)" in " ".join(stricter)


def test_split_birth_and_single_uncertain_move():
    tracks = pd.DataFrame(dict(track=[0, 1, 2, 4], name=["", "", "", ""],
                               first_period=["spring", "spring", "summer", "autumn"],
                               last_period=["autumn"] * 4, kind=["", "", "split", "birth"],
                               parent=["", "", "T1", ""]))
    moves = pd.DataFrame(dict(actor=["s"], from_period=["summer"], to_period=["autumn"],
                              from_track=[2], to_track=[4], confidence=[0.2]))
    sentences = describe_changes({"tracks": tracks, "moves": moves}, PERIODS)
    assert "Track T2 appears in summer, split off from T1." in sentences
    assert "Track T4 is born in autumn." in sentences
    assert ("Between summer and autumn, s moved into T4 (from T2). The move has low "
            "confidence (0.20) and may be noise.") in sentences


def test_long_lists_are_shortened_and_no_moves_said_plainly():
    plan = {f"m{i:02d}": [1, 2, 2] for i in range(11)}
    sentences = describe_changes({"memberships": _memberships(plan)}, PERIODS)
    assert any(s.endswith("m06, m07 and 3 others moved into T2 (from T1).") for s in sentences)
    still = {"a": [1, 1, 1], "b": [2, 2, 2]}
    assert describe_changes({"memberships": _memberships(still)}, PERIODS)[-1] == (
        "No actor changed track between consecutive periods."
    )


def test_is_low_confidence():
    assert is_low_confidence(0.49) and not is_low_confidence(0.5)
    assert not is_low_confidence(None) and not is_low_confidence("n/a")


def _many_moves(confidences: list[float]) -> pd.DataFrame:
    n = len(confidences)
    return pd.DataFrame(dict(actor=[f"a{i:02d}" for i in range(n)], from_period=["spring"] * n,
                             to_period=["summer"] * n, from_track=[1] * n, to_track=[2] * n,
                             confidence=confidences))


def test_many_low_confidence_moves_are_counted_not_listed():
    # Ten uncertain moves and two sure ones into T2: eight are named, two counted.
    sentences = describe_changes({"moves": _many_moves([0.1] * 10 + [0.9, 0.9])}, PERIODS)
    move = next(s for s in sentences if s.startswith("Between spring and summer"))
    assert move.endswith("Low confidence, possibly noise: a00 (0.10), a01 (0.10), a02 (0.10), "
                         "a03 (0.10), a04 (0.10), a05 (0.10), a06 (0.10), a07 (0.10) and 2 others.")
    assert "a08 (0.10)" not in move


def test_a_group_of_only_uncertain_moves_is_summed_up():
    # 1,200 moves, every one below 0.5 (the highest 0.45): one clause, no list of names.
    confidences = [0.05] * 1199 + [0.45]
    moves = _many_moves(confidences).assign(actor=[f"b{i:04d}" for i in range(1200)])
    sentences = describe_changes({"moves": moves}, PERIODS)
    move = next(s for s in sentences if s.startswith("Between spring and summer"))
    assert move == ("Between spring and summer, b0000, b0001, b0002, b0003, b0004, b0005, b0006, "
                    "b0007 and 1,192 others moved into T2 (from T1). All 1,200 of these moves "
                    "have low confidence (at most 0.45) and may be noise.")
