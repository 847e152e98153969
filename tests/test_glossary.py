"""The glossary: `roletrail explain` for every term, suggestions for unknown ones, and the report's glossary."""

from __future__ import annotations

import re
from html.parser import HTMLParser

import pytest
from click.testing import CliRunner

from tests.report.report_data import make_tables
from tracker.cli import main
from tracker.glossary import GLOSSARY, as_text, lookup, suggest, terms
from tracker.longitudinal.smoothing import DEFAULT_PENALTY
from tracker.report.html import build_report

# The terms the analyst asked about, each with an author its entry must name
# (the published source of the idea; the pairs are the field's standard references).
REQUIRED = {
    "inconsistencies": "Doreian",
    "density correlation": "Wasserman",
    "confidence": "Efron",
    "zero-block": "Wasserman",
    "smoothing": "Chakrabarti",
    "cohesive subgroups": "Wasserman",
    "core-periphery": "Borgatti",
    "centralized": "Wasserman",
    "hierarchy": "Wasserman",
    "transitive": "Wasserman",
    "position": "Lorrain",
    "block": "Wasserman",
    "image": "White",
    "track": "Greene",
    "p-value": "Phipson",
    "q-value": "Benjamini",
    "no clear structure": "Benjamini",
}


def _explain(*words):
    return CliRunner().invoke(main, ["explain", *words])


@pytest.mark.parametrize("term", sorted(REQUIRED))
def test_explain_each_term(term):
    result = _explain(*term.split())
    assert result.exit_code == 0, result.output
    out = result.output
    assert out.splitlines()[0] == term
    assert "Source:" in out and REQUIRED[term] in out
    entry = GLOSSARY[term]
    assert len(entry.plain) > 80  # an explanation, not a label
    assert entry.formula is None or "Formula:" in out


def test_every_term_has_a_formula_where_the_brief_expects_one():
    with_formula = [t for t in REQUIRED if t != "no clear structure"]
    assert all(GLOSSARY[t].formula for t in with_formula)


def test_other_names_and_spellings_find_the_entry():
    assert lookup("Density_Correlation").term == "density correlation"
    assert lookup("lean fit").term == "zero-block"  # the older name of the criterion (Wasserman & Faust 1994)
    assert lookup("evolutionary clustering").term == "smoothing"
    assert lookup("FDR").term == "q-value"
    assert _explain("core", "periphery").output.startswith("core-periphery")


def test_unknown_term_suggests_the_closest():
    result = _explain("hierachy")
    assert result.exit_code == 2
    assert "no entry for 'hierachy'; closest: hierarchy" in result.stderr
    assert suggest("densty corelation")[0] == "density correlation"
    assert suggest("confidance")[0] == "confidence"
    assert "closest" not in _explain("xqzv").stderr


def test_explain_alone_lists_every_term():
    result = _explain()
    assert result.exit_code == 0
    listed = [line.split("  ")[0] for line in result.output.splitlines() if line and not line.startswith("roletrail")]
    assert listed == terms()
    assert set(REQUIRED) <= set(listed)


def test_stated_numbers_match_the_code():
    # The smoothing entry quotes the default relative change penalty.
    quoted = float(re.search(r"auto: c = ([\d.]+)", GLOSSARY["smoothing"].formula).group(1))
    assert quoted == DEFAULT_PENALTY


def test_text_is_wrapped_to_the_width():
    text = as_text(lookup("confidence"), 60)
    assert max(len(line) for line in text.splitlines()) <= 60


class _Headings(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids = []

    def handle_starttag(self, tag, attrs):
        if tag == "h3" and dict(attrs).get("id", "").startswith("term-"):
            self.ids.append(dict(attrs)["id"])


def test_report_has_the_glossary(monkeypatch):
    import tracker.report.html as html

    monkeypatch.setattr(html, "javascript_bundle", lambda *a, **k: "")  # the chart runtime is not under test here
    tables, periods, meta = make_tables()
    page = build_report(tables, periods, meta)
    assert '<section id="glossary">' in page and 'href="#glossary"' in page
    parser = _Headings()
    parser.feed(page)  # Python's HTML parser as the outside reference for the page's structure
    assert parser.ids == [f"term-{'-'.join(t.split())}" for t in terms()]
    for term in REQUIRED:
        assert REQUIRED[term] in page
