"""One period of a fit as plain text for a terminal or a pipe (the ``show`` command).

Layout, top to bottom, every line at most ``width`` characters:

1. a heading: period, fit, criterion and the goodness of fit;
2. who is in each position (named by its track once the fit is aligned),
   the members wrapped under their position;
3. per relation, a small grid of the image with one symbol per block:
   ``#`` the block is a tie block in the image, ``+`` it holds some ties
   but the criterion leaves it empty, ``.`` it holds no tie at all;
4. the blocks that hold ties, one line each: ties, possible ties, density
   and image, so that a density of 1 over 3 possible pairs is never mistaken
   for a dense block over 1,763.

Only ASCII symbols are used, so the output survives any terminal, pager or
file.  Plain text, no colour: the same bytes on screen and in a pipe.
"""

from __future__ import annotations

import re
import shutil
import textwrap

import pandas as pd

__all__ = ["render_period", "terminal_width", "SYMBOLS"]

#: Image grid symbols: tie block, block with ties left empty by the criterion, block without ties.
SYMBOLS = {"tie": "#", "some": "+", "none": "."}


def terminal_width(default: int = 80) -> int:
    """Columns of the terminal, or ``default`` in a pipe (never less than 40)."""
    return max(40, shutil.get_terminal_size((default, 24)).columns)


def _num(value, digits: int = 3) -> str:
    if value is None or (isinstance(value, float) and pd.isna(value)):
        return "-"
    value = float(value)
    return f"{int(value)}" if value.is_integer() and digits == 0 else f"{value:.{digits}f}"


def _label(position: int, names: dict, isolates: set) -> str:
    name = names.get(position)
    if position in isolates:
        return f"P{position} no ties"
    return f"P{position} {name}" if name else f"P{position}"


def render_period(view: dict, width: int | None = None) -> str:
    """The text of :meth:`tracker.api.Study.show`'s result, wrapped to ``width`` columns."""
    width = max(40, int(width or terminal_width()))
    row = view["fit_row"]
    positions = view["positions"]
    isolates = set(int(p) for p in positions.loc[positions["isolates"], "position"])
    names = {int(k): v for k, v in (view.get("names") or {}).items()}
    out: list[str] = []

    def para(text: str, indent: str = "", first: str | None = None) -> None:
        out.extend(textwrap.wrap(text, width, initial_indent=indent if first is None else first,
                                 subsequent_indent=indent, break_on_hyphens=False) or [indent.rstrip()])

    para(f"Period {view['period']} - fit {view['fit']} - criterion {view['criterion']}")
    facts = [f"{int(row['positions'])} positions", f"{_num(row['inconsistencies'], 0)} inconsistencies",
             f"density correlation {_num(row['density_correlation'])}"]
    if row.get("p_value") is not None and not pd.isna(row["p_value"]):
        facts.append(f"permutation p {_num(row['p_value'])} ({int(row['draws'])} draws)")
    if row.get("perfect_fit"):
        facts.append("perfect fit")
    para(", ".join(facts), indent="  ")
    out.append("")

    out.append("Members")
    for position, members in sorted(view["members"].items()):
        head = f"  {_label(position, names, isolates)} ({len(members)}): "
        para(", ".join(members), indent="      ", first=head)
    out.append("")

    blocks = view["blocks"]
    labels = sorted(int(p) for p in positions["position"])
    cell = max(len(str(max(labels))) + 1, 2) if labels else 2
    for relation, part in blocks.groupby("relation", sort=True):
        ties = part.pivot(index="from_position", columns="to_position", values="ties").reindex(index=labels, columns=labels)
        img = part.pivot(index="from_position", columns="to_position", values="image").reindex(index=labels, columns=labels)
        out.append(f"Image of {relation} (row sends to column)")
        lead = max(len(f"P{p}") for p in labels) + 4
        if lead + cell * len(labels) <= width:
            out.append(" " * lead + "".join(str(p).rjust(cell) for p in labels))
            for p in labels:
                marks = []
                for q in labels:
                    t, i = ties.loc[p, q], img.loc[p, q]
                    mark = SYMBOLS["tie"] if i == 1 else (SYMBOLS["some"] if t and t > 0 else SYMBOLS["none"])
                    marks.append(mark.rjust(cell))
                out.append(f"  P{p}".ljust(lead) + "".join(marks))
            para(f"{SYMBOLS['tie']} tie block   {SYMBOLS['some']} ties, but empty under {view['criterion']}   "
                 f"{SYMBOLS['none']} no tie", indent="  ")
        else:
            para("(too many positions for a grid at this width; the blocks below list every tie)", indent="  ")
        out.append("")
        out.extend(_block_lines(part, relation, names, isolates, width))
        out.append("")
    return "\n".join(line.rstrip() for line in out).rstrip() + "\n"


def _block_lines(part: pd.DataFrame, relation: str, names: dict, isolates: set, width: int) -> list[str]:
    """The blocks that hold ties (and image-1 blocks without ties), one line each, with tie counts."""
    keep = part[(part["ties"] > 0) | (part["image"] == 1)].sort_values(["from_position", "to_position"])
    empty = len(part) - len(keep)
    lines = [f"Blocks of {relation} with ties ({len(keep)}; {empty} without a tie not listed)"]
    if keep.empty:
        return lines
    rows = [(f"P{int(r.from_position)}", f"P{int(r.to_position)}", str(int(r.ties)), str(int(r.possible)),
             f"{float(r.density):.3f}", SYMBOLS["tie"] if r.image == 1 else SYMBOLS["some"])
            for r in keep.itertuples(index=False)]
    header = ("from", "to", "ties", "possible", "density", "image")
    widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(header)]
    right = (False, False, True, True, True, False)

    def line(values):
        return "  " + "  ".join(v.rjust(w) if r else v.ljust(w) for v, w, r in zip(values, widths, right))

    lines.append(line(header))
    lines += [line(r)[:width] for r in rows]
    named = sorted({p for r in keep.itertuples(index=False) for p in (int(r.from_position), int(r.to_position))
                    if p in isolates or not re.fullmatch(r"T\d+", names.get(p) or "T0")})
    if named:
        text = "; ".join(f"P{p} = {_label(p, names, isolates).split(' ', 1)[1]}" for p in named)
        lines += textwrap.wrap(text, width, initial_indent="  ", subsequent_indent="  ")
    return lines
