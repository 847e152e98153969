"""Analysis files survive writing and reading; the comparison finds every changed value (hypothesis)."""

from __future__ import annotations

import math
from pathlib import Path

from hypothesis import given, settings
from hypothesis import strategies as st

from tracker.replication import Analysis, compare_results, read_analysis, write_analysis

_text = st.text(st.characters(blacklist_categories=("Cs",)), min_size=1, max_size=12)
_key = st.from_regex(r"[a-z][a-z_]{0,10}", fullmatch=True).filter(
    lambda k: k not in ("id", "periods", "fit", "kind", "file", "sha256", "name", "track", "actor"))
_scalar = st.one_of(st.booleans(), st.integers(-10**9, 10**9),
                    st.floats(allow_nan=False, allow_infinity=False), _text)
_settings = st.dictionaries(_key, st.one_of(_scalar, st.lists(_scalar, max_size=3)), max_size=6)


@settings(max_examples=40, deadline=None)
@given(fit=_settings, options=st.dictionaries(_key, _scalar, max_size=3), imports=_settings,
       name=_text, periods=st.one_of(st.none(), st.lists(_text, min_size=1, max_size=3)))
def test_analysis_files_round_trip(tmp_path_factory, fit, options, imports, name, periods):
    path = Path(tmp_path_factory.mktemp("rt")) / "a.toml"
    settings_ = {**fit, **({"options": options} if options else {})}
    analysis = Analysis(
        path=path, title=name, current_fit=3,
        imports=[{"kind": "events", "file": "e.csv", "sha256": "ab" * 32, "options": imports}],
        aliases=[{"name": name, "actor": name + "!"}],
        fits=[{"id": 3, "settings": settings_, "periods": periods}],
        aligns=[{"fit": 3, "settings": {"seed": 7}}],
        track_names=[{"fit": 3, "track": 2, "name": name}],
        report={"file": "r.html", "fit": 3, "options": {"structure_draws": 9}},
    )
    write_analysis(analysis, path)
    back = read_analysis(path)  # tomllib, the standard library's TOML reader, is the outside reference
    assert back.imports == analysis.imports and back.aliases == analysis.aliases
    assert back.fits == analysis.fits and back.aligns == analysis.aligns
    assert back.track_names == analysis.track_names and back.report == analysis.report
    assert (back.title, back.current_fit) == (name, 3)


def _results(rows):
    table = {"columns": ["period", "actor", "position", "confidence"], "rows": rows}
    return {"data": {}, "fits": {"1": {"settings": {}, "alignment": None, "tables": {"memberships": table}}}}


_rows = st.lists(st.tuples(st.sampled_from(["2019", "2020"]), _text, st.integers(1, 6),
                           st.one_of(st.none(), st.floats(0, 1))), max_size=12,
                 unique_by=lambda r: (r[0], r[1]))


@settings(max_examples=60, deadline=None)
@given(rows=_rows, data=st.data())
def test_every_changed_value_is_found(rows, data):
    rows = [list(r) for r in rows]
    assert compare_results(_results(rows), _results([list(r) for r in reversed(rows)]))[0] == []  # order is free
    if not rows:
        return
    i = data.draw(st.integers(0, len(rows) - 1))
    changed = [list(r) for r in rows]
    changed[i][2] += 1
    conf = changed[i][3]
    changed[i][3] = 0.5 if conf is None else (None if data.draw(st.booleans()) else math.nextafter(conf, 2.0))
    diffs, _ = compare_results(_results(rows), _results(changed))
    assert len(diffs) == 1
    assert f"position {rows[i][2]} recorded, {rows[i][2] + 1} replayed" in diffs[0].detail
    assert "confidence" in diffs[0].detail
