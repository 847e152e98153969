"""The bundled demo: an invented scenario run end to end (import, fit, align, report).

Scenarios live in ``scenarios/`` of the source tree and are installed inside the
package (``tracker._scenarios``), so ``roletrail demo`` works from any folder
after a plain ``pip install .``.  Each scenario folder has a ``scenario.json``
naming its files, its column mapping and its default fit.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Callable

from tracker.errors import UsageError

__all__ = ["scenarios_path", "list_scenarios", "load_scenario", "run_demo", "DEFAULT_SCENARIO"]

DEFAULT_SCENARIO = "coastal-agencies"


def scenarios_path() -> Path:
    """The folder of bundled scenarios (installed copy or source tree)."""
    here = Path(__file__).resolve().parent
    for candidate in (here / "_scenarios", here.parent / "scenarios"):
        if candidate.is_dir() and any(candidate.glob("*/scenario.json")):
            return candidate
    raise UsageError("the bundled scenarios are missing from this installation; reinstall roletrail")


def list_scenarios() -> dict[str, dict]:
    """Scenario name -> its scenario.json."""
    return {p.parent.name: json.loads(p.read_text(encoding="utf-8")) for p in sorted(scenarios_path().glob("*/scenario.json"))}


def load_scenario(name: str) -> tuple[Path, dict]:
    known = list_scenarios()
    if name not in known:
        raise UsageError(f"no scenario {name!r}; the scenarios are {', '.join(known)}")
    return scenarios_path() / name, known[name]


def run_demo(
    name: str = DEFAULT_SCENARIO,
    out: str | Path = "roletrail-demo",
    *,
    draws: int = 10,
    say: Callable[[str], None] = lambda _text: None,
) -> dict:
    """Run a scenario end to end into folder ``out``; returns the paths written.

    A fresh study ``<out>/<scenario>.db`` is made each time (an earlier one is
    replaced), so the demo can be run again.
    """
    from tracker.api import Study

    folder, spec = load_scenario(name)
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    db = out / f"{name}.db"
    for suffix in ("", "-wal", "-shm"):
        Path(str(db) + suffix).unlink(missing_ok=True)
    say(f"{spec['title']}: {spec['description']}")
    with Study(db) as study:
        report = study.import_events(
            folder / spec["events"], source=spec["source"], target=spec["target"], date=spec.get("date"),
            period_column=spec.get("period_column"), period=spec.get("period") or "year",
            relation=spec.get("relation"), relation_name=spec.get("relation_name"), weight=spec.get("weight"),
            undirected=bool(spec.get("undirected")),
        )
        say(f"imported {report['rows_loaded']} events into {report['periods']} periods")
        if spec.get("roster"):
            study.import_actors(folder / spec["roster"], actor=spec.get("roster_actor", "actor"),
                                first=spec.get("roster_first"), last=spec.get("roster_last"))
            say("imported the roster of actors")
        fit = dict(spec.get("fit") or {})
        # The scenario's own settings; whatever it leaves out takes the fit's defaults.
        settings = {key: fit[key] for key in ("method", "positions", "criterion", "seed", "options", "draws")
                    if key in fit}
        result = study.fit(**settings)
        say(f"fitted {len(result['periods'])} periods with {study.fit_info()['method']}")
        aligned = study.align(draws=draws)
        say(f"aligned into {int((aligned['tracks']['track'] > 0).sum())} tracks; {len(aligned['moves'])} moves")
        html = study.report(out / f"{name}-report.html")
    return {"study": db, "report": html}
