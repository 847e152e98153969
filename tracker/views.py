"""Tables shaped for people: the choice of K with its reason, fits told apart, tracks by name.

Pure functions on the data frames the store returns (no SQL, no printing);
the API calls them and the command prints what they return.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd

__all__ = ["auto_table", "auto_reasons", "fits_table", "name_tracks", "named_trajectories"]


def auto_table(fit_periods: pd.DataFrame) -> pd.DataFrame:
    """One row per period and number of positions tried by ``--positions auto``.

    Columns ``period, k, inconsistencies, density_correlation`` (plus ``icl``
    and ``log_likelihood`` for likelihood-based choices), ``chosen`` and
    ``rule``; empty when no period chose its number of positions.
    """
    rows = []
    for period, diag in zip(fit_periods["period"], fit_periods["diagnostics"]):
        diag = diag if isinstance(diag, dict) else {}
        for entry in diag.get("auto") or ():
            rows.append({"period": period, **entry, "rule": diag.get("auto_rule")})
    if not rows:
        return pd.DataFrame(columns=["period", "k", "inconsistencies", "density_correlation", "chosen", "rule"])
    frame = pd.DataFrame(rows)
    frame["k"] = frame["k"].astype(int)
    if "inconsistencies" in frame and frame["inconsistencies"].notna().all():
        frame["inconsistencies"] = frame["inconsistencies"].astype(int)
    frame["chosen"] = frame["chosen"].astype(bool)
    return frame


def auto_reasons(table: pd.DataFrame) -> list[str]:
    """The rule once, then one line per period: the K chosen and the numbers behind it."""
    out, rules = [], []
    for period, part in table.groupby("period", sort=False):
        part = part.sort_values("k")
        chosen = part[part["chosen"]]
        if chosen.empty:
            continue
        k = int(chosen["k"].iloc[0])
        rule = chosen["rule"].iloc[0] or "the method's own rule"
        if rule not in rules:
            rules.append(rule)
            out.append(f"chosen number of positions: the {rule}")
        if "icl" in part and part["icl"].notna().any():
            detail = f"ICL {float(chosen['icl'].iloc[0]):.1f}, the largest"
        else:
            rho = np.nan_to_num(part["density_correlation"].to_numpy(dtype=float), nan=0.0)
            ks = part["k"].to_numpy()
            pos = int(np.flatnonzero(ks == k)[0])
            if pos + 1 < len(ks):
                detail = f"correlation {rho[pos]:.3f}; {int(ks[pos + 1])} would add {rho[pos + 1] - rho[pos]:+.3f}"
            else:
                detail = f"correlation {rho[pos]:.3f}; every step gained enough, {k} is the most tried"
        out.append(f"  {period}: {k} ({detail})")
    return out


#: Settings shown by ``fits`` beside method, criterion and seed: what tells two fits apart.
_FIT_COLUMNS = ("positions", "smoothing", "relations", "draws", "k_range", "alpha", "cut", "options")


def fits_table(frame: pd.DataFrame) -> pd.DataFrame:
    """The fits listing with the settings that tell fits apart spelled out (``params`` parsed)."""
    out = frame.copy()
    params = [p if isinstance(p, dict) else json.loads(p) for p in out["params"]]
    out["params"] = params
    out["positions"] = [str(p.get("positions")) for p in params]
    out["smoothing"] = [smoothing_label(p) for p in params]
    out["relations"] = [", ".join(p.get("relations") or []) or "all" for p in params]
    out["draws"] = [int(p.get("draws", 0)) for p in params]
    out["k_range"] = [f"{p.get('k_min')}-{p.get('k_max')}" if p.get("positions") == "auto" else "" for p in params]
    out["alpha"] = [p.get("alpha") for p in params]
    out["cut"] = [p.get("cut") for p in params]
    out["options"] = [", ".join(f"{k}={v}" for k, v in sorted((p.get("options") or {}).items())) for p in params]
    first = ["fit", "current", "method", "criterion", "seed", *_FIT_COLUMNS, "periods"]
    rest = [c for c in out.columns if c not in first]
    return out[[c for c in first if c in out.columns] + rest]


def smoothing_label(params: dict) -> str:
    """The fit's smoothing as the fits listing and the report show it: auto, off, a penalty, or none (dynamic)."""
    from tracker.pipeline.fitting import is_dynamic

    if is_dynamic(params):
        return "none (dynamic model)"  # its chain links the periods; "off" would read as periods fitted alone
    if params.get("method") == "regular":
        return "off"
    value = params.get("smoothing", "auto")
    if value == "auto":
        return "auto"
    return "off" if float(value) == 0 else f"{float(value):g}"


def name_tracks(frame: pd.DataFrame, names: dict, columns=("from_track", "to_track")) -> pd.DataFrame:
    """Add ``<x>_name`` beside every track column (track id kept for programs)."""
    out = frame.copy()
    for col in columns:
        if col not in out.columns:
            continue
        label = col.replace("_track", "_name") if col != "track" else "track_name"
        values = [None if pd.isna(t) else names.get(int(t), f"T{int(t)}") for t in out[col]]
        out.insert(list(out.columns).index(col) + 1, label, values)
    return out


def named_trajectories(wide: pd.DataFrame, names: dict, periods) -> pd.DataFrame:
    """Trajectories with each period's cell showing the track's name (blank when absent)."""
    out = wide.copy()
    for period in periods:
        if period in out.columns:
            out[period] = [None if pd.isna(t) else names.get(int(t), f"T{int(t)}") for t in out[period]]
    return out
