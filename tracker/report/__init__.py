"""Charts and the offline HTML report.

Everything here reads the tidy tables that :mod:`tracker.api` hands out
(pandas DataFrames) and never touches the study database:

* :mod:`tracker.report.charts`: one altair chart per view, a registry of them and
  :func:`~tracker.report.charts.save_chart` (PNG, SVG or Vega-Lite JSON);
* :mod:`tracker.report.narrative`: plain-language sentences about what changed;
* :mod:`tracker.report.anonymise`: stable codes in place of actor labels;
* :mod:`tracker.report.html`: one self-contained HTML file that works offline.
"""

__all__: list[str] = []
