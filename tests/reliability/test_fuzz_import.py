"""Importers under random and damaged files: a correct import or one clear line, never a crash.

Three kinds of input:

* well-formed files written in every dialect the reader accepts (delimiter,
  quoting, line ends, byte-order mark, blank lines, column order, chunk
  boundaries): the stored events must be exactly the rows written (a round
  trip, checked against the rows the test itself wrote);
* the same files damaged by mutations (truncation, random bytes, NUL bytes,
  latin-1 bytes, broken quoting, stray delimiters, duplicate header names,
  changed line ends, very long fields, impossible weights and dates);
* random bytes.

The harness (tests/reliability/conftest.py) accepts only two outcomes: an
import after which :func:`tracker.store.check.check_study` finds nothing wrong,
or a one-line :class:`tracker.errors.RoletrailError` with the study unchanged.

Set ROLETRAIL_FUZZ_EXAMPLES to run more examples than the quick default.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import re
import shutil
import time
import unicodedata
from pathlib import Path

import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from tests.reliability.conftest import attempt

EXAMPLES = int(os.environ.get("ROLETRAIL_FUZZ_EXAMPLES", "30"))
FUZZ = settings(
    max_examples=EXAMPLES,
    deadline=None,
    derandomize=not os.environ.get("ROLETRAIL_FUZZ_EXAMPLES"),  # the normal suite is repeatable
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.function_scoped_fixture],
)
OPTIONS = dict(source="source", target="target", date="date", relation="kind", weight="w")
HEADER = ("source", "target", "date", "kind", "w")

# Labels: any text a UTF-8 file can hold except NUL (refused on purpose), not
# blank after stripping; the reader must keep every other character.
_CHARS = st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00")
labels = st.text(_CHARS, min_size=1, max_size=12).filter(lambda s: s.strip() != "")
plain_labels = st.text("abcdefghij ", min_size=1, max_size=6).filter(lambda s: s.strip() != "")


@st.composite
def dates(draw):
    """A date between the years 1000 and 2999 in one of the accepted spellings, and its year period."""
    day = draw(st.dates(dt.date(1000, 1, 1), dt.date(2999, 12, 31)))
    style = draw(st.sampled_from(["iso", "year", "datetime", "offset"]))
    if style == "year":
        return f"{day.year:04d}", f"{day.year:04d}"
    if style == "iso":
        return day.isoformat(), f"{day.year:04d}"
    clock = f"{draw(st.integers(0, 23)):02d}:{draw(st.integers(0, 59)):02d}:00"
    # Up to nanoseconds: one such value once made pandas drop every date outside 1677-2262.
    clock += draw(st.one_of(st.just(""), st.integers(1, 9).map(lambda k: "." + "123456789"[:k])))
    zone = draw(st.sampled_from(["+05:00", "-11:30", "Z", "+00:00"])) if style == "offset" else ""
    # The local date is kept: an offset never moves an event into another year.
    return f"{day.isoformat()}T{clock}{zone}", f"{day.year:04d}"


weights = st.one_of(
    st.integers(0, 10**9).map(str),
    st.floats(0, 1e12, allow_nan=False, allow_infinity=False).map(repr),
    st.floats(0, 1e12, allow_nan=False, allow_infinity=False).map(lambda x: f"{x:e}"),
)


def _name(text: str) -> str:
    """A name as stored: NFC (Unicode Standard Annex #15), whitespace trimmed and collapsed."""
    return " ".join(unicodedata.normalize("NFC", text).split())


@st.composite
def event_files(draw, label=labels):
    """A well-formed event file and the events it must give.

    Returns ``(bytes, options, expected)`` where ``expected`` lists
    ``(row, source, target, relation, period, weight)`` of every row that is
    not a self-tie.
    """
    delimiter = draw(st.sampled_from([",", ";", "\t", "|"]))
    newline = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    quote_all = draw(st.booleans())
    bom = draw(st.booleans())
    columns = list(HEADER) + (["note"] if draw(st.booleans()) else [])
    columns = draw(st.permutations(columns))
    n = draw(st.integers(1, 25))
    records, expected, row = [], [], 0
    for _ in range(n):
        if draw(st.integers(0, 9)) == 0:
            records.append(None)  # a blank line keeps its row number
            row += 1
        source = draw(label)
        target = draw(st.one_of(label, st.just(source)))
        date, period = draw(dates())
        relation = draw(label)
        weight = draw(weights)
        values = {"source": source, "target": target, "date": date, "kind": relation, "w": weight, "note": draw(label)}
        records.append([values[c] for c in columns])
        row += 1
        if _name(source) != _name(target):
            expected.append((row, _name(source), _name(target), _name(relation), period, float(weight)))

    def field(value: str) -> str:
        if quote_all or any(c in value for c in (delimiter, '"', "\n", "\r")):
            return '"' + value.replace('"', '""') + '"'
        return value

    lines = [delimiter.join(field(c) for c in columns)]
    lines += ["" if r is None else delimiter.join(field(v) for v in r) for r in records]
    data = (newline.join(lines) + newline).encode("utf-8")
    options = dict(OPTIONS)
    if draw(st.booleans()):
        options["delimiter"] = "tab" if delimiter == "\t" else delimiter
    return (b"\xef\xbb\xbf" if bom else b"") + data, options, expected


@pytest.fixture
def small_chunks(monkeypatch):
    """Chunks of 4 rows, so that chunk boundaries fall inside every generated file."""
    import tracker.ingest.reader as reader

    monkeypatch.setattr(reader, "CHUNK_ROWS", 4)


@FUZZ
@given(case=event_files())
def test_well_formed_files_round_trip(template, small_chunks, case):
    data, options, expected = case
    outcome = attempt(template, data, **options)
    assert outcome.ok, outcome.message
    got = [(r, s, t, k, p, pytest.approx(w, rel=1e-15)) for r, s, t, k, p, w in outcome.events]
    assert expected == got
    assert outcome.report["self_ties_dropped"] == outcome.report["rows_read"] - len(expected)


# ---------------------------------------------------------------------- mutations
_SPECIAL_VALUES = [
    "", " ", "nan", "NaN", "inf", "-inf", "Infinity", "-1", "-0", "1e400", "1e13", "1e-400", "0x10", "1,5",
    "0999", "3000-01-01", "2019-02-30", "99999", "-2019-01-01", "2019-13-01", "0000-01-01", "9999-12-31T23:59:59",
    "2019-01-01T25:00", "1677-09-21", "2262-04-12", "\x00", "\ufeff", "é", '"', '""', "\\", "x" * 2000,
]


@st.composite
def mutated(draw):
    """A well-formed file damaged by one to three mutations."""
    data, options, _ = draw(event_files(label=plain_labels))
    for _ in range(draw(st.integers(1, 3))):
        data = draw(_mutation(data))
    return data, options


def _mutation(data: bytes):
    at = st.integers(0, max(len(data), 0))
    return st.one_of(
        at.map(lambda i: data[:i]),  # truncated
        st.tuples(at, st.binary(min_size=1, max_size=40)).map(lambda t: data[: t[0]] + t[1] + data[t[0] :]),
        st.tuples(at, st.integers(1, 30)).map(lambda t: data[: t[0]] + data[t[0] + t[1] :]),  # bytes lost
        st.tuples(at, st.sampled_from([b"\x00", b"\xe9", b"\xff", b"\xc3", b"\x80", b"\r", b"\n", b'"', b",", b";", b"\t", b"|"]))
        .map(lambda t: data[: t[0]] + t[1] + data[t[0] :]),
        st.sampled_from([b"\r\n", b"\r", b"\n\n"]).map(lambda nl: data.replace(b"\n", nl)),
        st.just(data.replace(b"target", b"source", 1)),  # duplicate header name
        st.just(data.replace(b"date", b" date ", 1)),  # padded header name
        st.just(b"\xef\xbb\xbf" + data),
        st.just(b"\xff\xfe" + data),  # a UTF-16 mark on UTF-8 text
        st.just(data.decode("utf-8", "replace").encode("latin-1", "replace")),  # re-saved as latin-1
        st.tuples(at, st.sampled_from(_SPECIAL_VALUES)).map(lambda t: _replace_field(data, t[0], t[1])),
        st.just(data + data.split(b"\n")[-2] + b"\n" if data.count(b"\n") > 1 else data),  # a repeated line
    )


def _replace_field(data: bytes, at: int, value: str) -> bytes:
    """Replace the field around byte ``at`` by ``value`` (written unquoted, as a careless tool would)."""
    stops = b",;\t|\r\n"
    start = at
    while start > 0 and data[start - 1] not in stops:
        start -= 1
    end = at
    while end < len(data) and data[end] not in stops:
        end += 1
    return data[:start] + value.encode("utf-8") + data[end:]


@FUZZ
@given(case=mutated())
def test_damaged_event_files_import_or_fail_cleanly(template, small_chunks, case):
    data, options = case
    attempt(template, data, **options)


@FUZZ
@given(data=st.binary(max_size=3000))
@example(data=b"")
@example(data=b"\x00" * 10)
@example(data=b"PAR1")
@example(data=b"PAR1" + bytes(range(256)) + b"PAR1")
def test_random_bytes_fail_cleanly(template, data):
    attempt(template, data, **OPTIONS)
    attempt(template, b"source,target,date,kind,w\n" + data, **OPTIONS)
    attempt(template, data, suffix=".parquet", **OPTIONS)


@st.composite
def weird_rows(draw):
    """Rows whose fields are drawn from the values that break careless readers."""
    value = st.one_of(st.sampled_from(_SPECIAL_VALUES), plain_labels, st.text(_CHARS, max_size=8))
    rows = draw(st.lists(st.lists(value, min_size=3, max_size=7), min_size=1, max_size=8))
    delimiter = draw(st.sampled_from([",", ";"]))
    lines = [delimiter.join(HEADER)] + [delimiter.join(r) for r in rows]
    return ("\n".join(lines) + "\n").encode("utf-8")


@FUZZ
@given(data=weird_rows())
def test_rows_of_hostile_values_import_or_fail_cleanly(template, data):
    outcome = attempt(template, data, **OPTIONS)
    if outcome.ok:
        # Whatever was accepted is stored as strict rules allow (checked by the
        # harness); here: every stored period is a year of the accepted range.
        assert all(1000 <= int(e[4]) <= 2999 for e in outcome.events)


# ---------------------------------------------------------------------- rosters
@st.composite
def roster_files(draw):
    """A well-formed roster, and what each actor must end up with."""
    n = draw(st.integers(1, 12))
    names = draw(st.lists(labels, min_size=n, max_size=n, unique_by=_name))
    rows, expected = [], {}
    for name in names:
        first = draw(st.one_of(st.just(""), st.integers(1000, 2999).map(str)))
        last = draw(st.one_of(st.just(""), st.integers(int(first or 1000), 2999).map(str)))
        sector = draw(st.one_of(st.just(""), labels))
        rows.append([name, first, last, sector])
        expected[_name(name)] = (
            first + "-01-01" if first else None,
            last + "-12-31" if last else None,
            sector,
        )

    def field(value: str) -> str:
        return '"' + value.replace('"', '""') + '"'

    lines = ["actor,from,until,sector"] + [",".join(field(v) for v in r) for r in rows]
    return ("\r\n".join(lines) + "\r\n").encode("utf-8"), expected


@FUZZ
@given(case=roster_files())
def test_well_formed_rosters_round_trip(template, case):
    import json

    data, expected = case
    outcome = attempt(template, data, kind="actors", actor="actor", first="from", last="until")
    assert outcome.ok, outcome.message
    for name, (first, last, sector) in expected.items():
        in_roster, got_first, got_last, attributes = outcome.actors[name]
        assert in_roster and (got_first, got_last) == (first, last)
        assert json.loads(attributes) == ({"sector": sector} if sector else {})


@st.composite
def mutated_rosters(draw):
    data, _ = draw(roster_files())
    for _ in range(draw(st.integers(1, 3))):
        data = draw(_mutation(data))
    return data


@FUZZ
@given(data=mutated_rosters())
def test_damaged_rosters_import_or_fail_cleanly(template, data):
    attempt(template, data, kind="actors", actor="actor", first="from", last="until")


# ---------------------------------------------------------------------- regression corpus
CORPUS = Path(__file__).parent / "corpus"
CASES = {k: v for k, v in json.loads((CORPUS / "cases.json").read_text(encoding="utf-8")).items() if not k.startswith("_")}


def _corpus_input(name: str, case: dict) -> bytes:
    data = (CORPUS / name).read_bytes()
    if case.get("pad_rows"):
        row = case.get("pad_row", "pad {i},pad two,2019,x,1")
        pad = "".join(row.format(i=i) + "\n" for i in range(case["pad_rows"])).encode()
        head, _, rest = data.partition(b"\n")
        data = head + b"\n" + pad + rest
    return data


def _corpus_options(case: dict) -> dict:
    return dict(OPTIONS if case.get("kind", "events") == "events" else {}, **case.get("options", {}))


def test_corpus_lists_every_file():
    assert sorted(CASES) == sorted(p.name for p in CORPUS.iterdir() if p.name != "cases.json")


@pytest.mark.parametrize("name", sorted(CASES))
def test_corpus_replays(template, name):
    case = CASES[name]
    start = time.perf_counter()
    outcome = attempt(template, _corpus_input(name, case), kind=case.get("kind", "events"),
                      suffix=Path(name).suffix, **_corpus_options(case))
    assert time.perf_counter() - start < case.get("max_seconds", 30)
    if case["expect"] == "ok":
        assert outcome.ok, outcome.message
        want = sorted(tuple(e) for e in case["events"])
        assert sorted((s, t, k, p, w) for _, s, t, k, p, w in outcome.events) == want
    else:
        assert not outcome.ok, f"{name} was accepted"
        assert re.search(case["expect"], outcome.message), outcome.message


_FLAGS = {"source": "--source", "target": "--target", "date": "--date", "relation": "--relation", "weight": "--weight",
          "date_format": "--date-format", "delimiter": "--delimiter", "actor": "--actor", "first": "--first", "last": "--last"}


@pytest.mark.parametrize("name", sorted(n for n, c in CASES.items() if c["expect"] != "ok"))
def test_corpus_errors_through_the_command_line(template, tmp_path, name):
    """Exit status 2, one line 'roletrail: error: ...', no traceback, the study unchanged."""
    from click.testing import CliRunner

    from tracker.cli import main

    case = CASES[name]
    db = tmp_path / "study.db"
    shutil.copyfile(template, db)
    before = db.read_bytes()
    path = tmp_path / name
    path.write_bytes(_corpus_input(name, case))
    command = "import" if case.get("kind", "events") == "events" else "import-actors"
    args = [arg for key, value in _corpus_options(case).items() for arg in (_FLAGS[key], value)]
    result = CliRunner().invoke(main, ["--db", str(db), command, str(path), *args])
    assert result.exit_code == 2, result.output
    lines = [line for line in result.output.splitlines() if line.strip()]
    assert len(lines) == 1 and lines[0].startswith("roletrail: error: "), result.output
    assert "Traceback" not in result.output
    assert re.search(case["expect"], lines[0]), lines[0]
    assert db.read_bytes() == before
