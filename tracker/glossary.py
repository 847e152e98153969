"""Plain words for the terms roletrail prints: one glossary for ``roletrail explain`` and the report.

Each :class:`Entry` holds a plain-language explanation for an analyst who has
not read the methods literature, the formula where there is one (plain text,
readable in a terminal and in HTML) and the published sources it rests on.
Formulas follow the code that computes the numbers (the module named in
``where``); the sources are those cited in that code's docstrings.

>>> lookup("Density-Correlation").term
'density correlation'
>>> suggest("densty corelation")[0]
'density correlation'
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass

from tracker.errors import UsageError

__all__ = ["Entry", "GLOSSARY", "terms", "lookup", "suggest", "normalise", "as_text"]


@dataclass(frozen=True)
class Entry:
    """One glossary entry.

    Attributes
    ----------
    term : str
        The word as roletrail prints it (lower case).
    summary : str
        One line, for the list of terms.
    plain : str
        The explanation in plain language.
    formula : str or None
        The formula in plain text (Unicode), where there is one.
    sources : tuple of str
        Published sources, as "Author (year), where".
    also : tuple of str
        Other names a user may type (``explain`` accepts them).
    see : tuple of str
        Related entries.
    """

    term: str
    summary: str
    plain: str
    formula: str | None
    sources: tuple[str, ...]
    also: tuple[str, ...] = ()
    see: tuple[str, ...] = ()


_WF = "Wasserman, S. & Faust, K. (1994). Social Network Analysis. Cambridge University Press"
_DBF = "Doreian, P., Batagelj, V. & Ferligoj, A. (2005). Generalized Blockmodeling. Cambridge University Press"
_BE = "Borgatti, S. P. & Everett, M. G. (1999). Models of core/periphery structures. Social Networks 21, 375-395"
_CKT = "Chakrabarti, D., Kumar, R. & Tomkins, A. (2006). Evolutionary clustering. Proceedings of KDD 2006"
_BH = ("Benjamini, Y. & Hochberg, Y. (1995). Controlling the false discovery rate: a practical and powerful "
       "approach to multiple testing. "
       "Journal of the Royal Statistical Society B 57, 289-300")
_PS = ("Phipson, B. & Smyth, G. K. (2010). Permutation p-values should never be zero. "
       "Statistical Applications in Genetics and Molecular Biology 9(1)")
_WBB = ("White, H. C., Boorman, S. A. & Breiger, R. L. (1976). Social structure from multiple networks I. "
        "American Journal of Sociology 81, 730-780")
_MM = ("Matias, C. & Miele, V. (2017). Statistical clustering of temporal networks through a dynamic "
       "stochastic block model. Journal of the Royal Statistical Society B 79, 1119-1141")
_IDEAL_SOURCES = (f"{_WF}, sec. 10.3 (ideal images)", f"{_DBF} (ideal block types)")

_ENTRIES = (
    Entry(
        "position",
        "a set of actors with the same pattern of ties",
        "A group of actors who relate to the rest of the network in the same way: they send ties to the same "
        "kinds of others and receive ties from the same kinds of others, whether or not they are tied to each "
        "other. Two agencies that both coordinate the small councils hold the same position even if they never "
        "work together. roletrail finds the positions of each period; the numbers it gives them (P1, P2, ...) "
        "mean nothing from one period to the next until the periods are aligned into tracks.",
        "A partition φ gives each of the n actors one of B positions, φ(i) ∈ {1..B}. Exactly equivalent "
        "actors i and j (structural equivalence) have x_ik = x_jk and x_ki = x_kj for every other actor k; "
        "real data are grouped by how close they come to that.",
        ("Lorrain, F. & White, H. C. (1971). Structural equivalence of individuals in social networks. "
         "Journal of Mathematical Sociology 1, 49-80", f"{_WF}, ch. 9"),
        also=("positions", "role", "structural equivalence", "partition"),
        see=("block", "image", "track"),
    ),
    Entry(
        "block",
        "the ties from one position to another, with their density",
        "All the possible ties from the actors of one position to the actors of another position (or among "
        "the actors of one position), in one relation. If you sort the rows and columns of the network's "
        "table by position, each block is one rectangle of it. For each block roletrail counts the ties "
        "present, the ties possible and their share (the density).",
        "density d_kl = t_kl / p_kl, where t_kl counts the ties from position k to position l and "
        "p_kl = n_k · n_l for k ≠ l, n_k · (n_k − 1) for k = l (no self-ties); an undirected relation counts "
        "each pair once (n_k · (n_k − 1) / 2 inside a position).",
        (f"{_WF}, ch. 10 (density tables)",),
        also=("blocks", "density table", "density"),
        see=("image", "zero-block", "position"),
    ),
    Entry(
        "image",
        "a small 0/1 table: which positions are tied to which",
        "A table with one row and one column per position that says, for each block, whether the positions "
        "count as tied (1) or not (0). It sums up the structure of the network at the level of positions: "
        "who relates to whom. The criterion you choose with --criterion decides when a block counts as tied.",
        "b_kl ∈ {0, 1}. zero-block: b_kl = 1 when t_kl > 0; one-block: b_kl = 1 when t_kl = p_kl; "
        "density: b_kl = 1 when d_kl ≥ α (α = the whole network's density unless --alpha); "
        "max-value: b_kl = 1 when the block's largest value ≥ the cut; mean-value: b_kl = 1 when the block's "
        "mean value per possible tie ≥ the mean of all values between distinct actors. A block with no tie is 0 "
        "under every criterion.",
        (f"{_WF}, sec. 10.2 (image matrices and their criteria)", _WBB),
        also=("image matrix", "images", "criterion", "blockmodel"),
        see=("block", "zero-block", "ideal structure"),
    ),
    Entry(
        "zero-block",
        "a block counts as tied as soon as it holds one tie",
        "The image criterion suited to sparse data, and roletrail's default: a block is 0 only when it holds "
        "no tie at all; a single tie makes it 1. Where ties are scarce, a pair of positions that never "
        "interact, period after period, is the finding that matters. The other side of this: one stray tie "
        "turns a block to 1, so read the image with its p-value.",
        "b_kl = 1 if t_kl > 0, else b_kl = 0.",
        (f"{_WF}, sec. 10.2 (the zeroblock or lean-fit criterion)", _WBB),
        also=("zero block", "zeroblock", "lean fit", "null block"),
        see=("image", "inconsistencies"),
    ),
    Entry(
        "inconsistencies",
        "cells of the data that disagree with the image",
        "How many cells of the data contradict the image: ties missing from blocks the image calls tied (1), "
        "plus ties present in blocks the image calls empty (0). Zero means the image describes the data "
        "exactly (a perfect fit). Lower is better, but only compare fits of the same data under the same "
        "criterion: under zero-block, for example, the empty blocks can hold no inconsistency by definition.",
        "e = Σ over blocks with b_kl = 1 of (p_kl − t_kl)  +  Σ over blocks with b_kl = 0 of t_kl, "
        "summed over relations (an undirected relation counts each pair once).",
        (f"{_DBF}, ch. 6 (the criterion function: null-block and complete-block inconsistencies)",),
        also=("inconsistency", "errors", "criterion function", "perfect fit"),
        see=("image", "density correlation"),
    ),
    Entry(
        "density correlation",
        "how well the positions predict who is tied to whom (1 = perfectly)",
        "A measure of how well the positions explain the ties: the correlation between each pair's tie (1 if "
        "tied, 0 if not) and the density of the block the pair falls into. It is 1 when every block is either "
        "all ties or no ties, and near 0 when knowing two actors' positions tells you nothing about whether "
        "they are tied. The fit table reports it over every actor present (the isolates' own position "
        "included); the fit test and the report's fit chart compute it over the actors with at least "
        "one tie, so the two differ in a period with isolates.",
        "r = Pearson correlation, over all pairs i ≠ j and all relations, between x_ij (1 if i is tied to j, "
        "else 0) and d_φ(i)φ(j), the density of the block of i's and j's positions.",
        (f"{_WF}, sec. 10.4.2 (goodness of fit of a blockmodel)",),
        also=("density-correlation", "correlation", "goodness of fit"),
        see=("inconsistencies", "p-value"),
    ),
    Entry(
        "confidence",
        "the probability that an actor really changed position",
        "A move's confidence is the probability that the actor really changed position between those two "
        "periods, and not just appeared to because of noise in the data. 0.9 means: of moves reported with "
        "this confidence, about 9 in 10 are real. A confidence should mean what it says (be calibrated); "
        "roletrail checks this by simulating studies from the fitted model, where the real moves are known, "
        "and comparing the stated confidence with the share of moves that are real. Moves below 0.5 are "
        "flagged: they are more likely noise than not.",
        "confidence = P(actor's position at period s differs from its position at period t | data): for the "
        "dynamic model from the chain's pairwise posterior; for the descriptive methods learned on studies "
        "simulated from the fit (parametric bootstrap) and refitted the same way, where the real moves are "
        "known (a calibration map by isotonic regression); calibration error "
        "ECE = Σ over bins of (moves in bin / all moves) · |mean confidence − share real|.",
        ("Efron, B. (1979). Bootstrap methods: another look at the jackknife. Annals of Statistics 7, 1-26",
         _MM,
         "DeGroot, M. H. & Fienberg, S. E. (1983). The comparison and evaluation of forecasters. "
         "The Statistician 32, 12-22 (calibration; title and authors verified, volume and pages cited from memory)"),
        also=("move confidence", "calibration", "posterior", "bootstrap"),
        see=("move", "track", "smoothing"),
    ),
    Entry(
        "move",
        "an actor that changes track between two periods",
        "An actor who belongs to one track in one period and to another track in a later period in which it "
        "is also present. An actor that is absent, or has no tie in a period, has not moved: sparse event data "
        "leave most actors silent in some years. Each move comes with a confidence.",
        None,
        (f"{_WF}, ch. 9-10 (positions)",
         "Greene, D., Doyle, D. & Cunningham, P. (2010). Tracking the evolution of communities in dynamic "
         "social networks. ASONAM"),
        also=("moves", "mover", "transition", "mobility"),
        see=("track", "confidence"),
    ),
    Entry(
        "smoothing",
        "fitting periods together, paying a penalty for each change of position",
        "Fitting all periods together instead of one by one, with a penalty for every actor that changes "
        "position from one period to the next. In sparse data an actor's few ties in one year can point "
        "anywhere, so fitting each year alone turns noise into false moves. With smoothing, a one-year blip "
        "has to pay the penalty twice (out and back) while a lasting move pays once and is then supported by "
        "every later year. For the descriptive methods (structural, CONCOR, optimize) the penalty is added to "
        "the method's own objective; --smooth sets it: auto (the default, 0.5), off (each period alone) or a "
        "number, in units of the method's own per-actor objective, so that 1 means one change costs as much "
        "as an average actor's misfit. The dynamic model (the default method) needs no penalty and takes no "
        "--smooth, not even off: its Markov chain gives every actor a probability of keeping its position from "
        "one period to the next. To fit each period alone, choose a descriptive method with --smooth off.",
        "descriptive methods, period by period in time order: choose z_t minimising objective_t(z_t) + "
        "c · s_t · #{actors i with z_t(i) ≠ z_t−1(i)}, where s_t is the method's per-actor objective of the "
        "unsmoothed fit and c the relative penalty (auto: c = 0.5); c = 0 gives exactly the unsmoothed fit.",
        (_CKT, _MM),
        also=("smooth", "evolutionary clustering", "change penalty", "penalty", "nats"),
        see=("move", "confidence", "track"),
    ),
    Entry(
        "ideal structure",
        "a textbook pattern an image is compared with",
        "One of five textbook patterns an image can be compared with after its positions are put in the best "
        "order: cohesive subgroups, core-periphery, centralized, hierarchy and transitive. roletrail names "
        "the closest one for each period and relation, counts the cells that do not match, and tests whether "
        "the match is better than chance.",
        "mismatches m = min over orderings of the positions of Σ_k,l |b_kl − t_kl|, where t is the ideal "
        "image; fit = 1 − m / B².",
        _IDEAL_SOURCES,
        also=("ideal structures", "ideal image", "ideal images", "structure", "structures"),
        see=("cohesive subgroups", "core-periphery", "centralized", "hierarchy", "transitive", "no clear structure"),
    ),
    Entry(
        "cohesive subgroups",
        "positions tied inside themselves, not to each other",
        "An ideal structure: each position is tied internally and not to the other positions, like separate "
        "blocs or clusters that keep to themselves.",
        "t_kl = 1 exactly when k = l.",
        _IDEAL_SOURCES,
        also=("cohesive subgroup", "cohesive-subgroups", "subgroups", "blocs", "clusters"),
        see=("ideal structure",),
    ),
    Entry(
        "core-periphery",
        "a core tied to everyone; a periphery tied only to the core",
        "An ideal structure: the core positions are tied among themselves and to every other position; the "
        "peripheral positions are tied to the core but not to each other. roletrail also checks the raw ties "
        "with Borgatti and Everett's core-periphery correlation.",
        "t_kl = 1 exactly when k or l is in the core C (1 ≤ |C| ≤ B − 1); periphery-periphery cells are 0.",
        (_BE,) + _IDEAL_SOURCES,
        also=("core periphery", "core", "periphery", "coreness"),
        see=("ideal structure", "centralized"),
    ),
    Entry(
        "centralized",
        "all ties go to (or come from) one central position",
        "An ideal structure: every position sends its ties to one central position (or receives them from "
        "it), as in a star, and the others are not tied among themselves.",
        "t_kl = 1 exactly when l = c (ties to the centre c) or, in the other variant, when k = c (ties from "
        "the centre).",
        _IDEAL_SOURCES,
        also=("centralised", "star", "centre", "center"),
        see=("ideal structure", "core-periphery"),
    ),
    Entry(
        "hierarchy",
        "a chain: each position sends to the one directly above it",
        "An ideal structure: positions form a chain of command; each position sends ties to the one directly "
        "above it, and no ties come back down.",
        "with positions ranked 0 (top) to B − 1: t_kl = 1 exactly when l = k − 1.",
        _IDEAL_SOURCES,
        also=("hierarchical", "chain", "ranking"),
        see=("ideal structure", "transitive"),
    ),
    Entry(
        "transitive",
        "a ranking: each position sends to every position above it",
        "An ideal structure: positions are ranked and each sends ties to every position above it, so if k "
        "sends to l and l sends to m, k also sends to m. No ties go down the ranking.",
        "with positions ranked 0 (top) to B − 1: t_kl = 1 exactly when l < k.",
        _IDEAL_SOURCES,
        also=("transitivity", "transitive structure"),
        see=("ideal structure", "hierarchy"),
    ),
    Entry(
        "track",
        "one position followed across periods",
        "Position numbers mean nothing from one period to the next, so roletrail links each period's "
        "positions to those of the period before, by who is in them and by how they relate to the others. "
        "A chain of linked positions is a track: a lasting role in the network. Tracks can be born, end, "
        "split and merge, and you can give them names (name-track).",
        "similarity s = w · J + (1 − w) · role similarity, with J = |members now ∩ members before| / "
        "|members now ∪ members before| (Jaccard overlap) and w the overlap weight (--overlap-weight); "
        "positions are matched one to one for the largest total similarity (the Hungarian method), and a "
        "link needs s ≥ the link threshold (--link-threshold).",
        ("Greene, D., Doyle, D. & Cunningham, P. (2010). Tracking the evolution of communities in dynamic "
         "social networks. ASONAM",
         "Palla, G., Barabási, A.-L. & Vicsek, T. (2007). Quantifying social group evolution. Nature 446, 664-667",
         "Kuhn, H. W. (1955). The Hungarian method for the assignment problem. Naval Research Logistics "
         "Quarterly 2, 83-97"),
        also=("tracks", "alignment", "align", "persistent position"),
        see=("position", "move"),
    ),
    Entry(
        "p-value",
        "how often chance alone gives a result at least this striking",
        "How often random data would give a result at least as striking as the one found. A small p-value "
        "(below 0.05, say) means the structure is unlikely to be an accident of random ties; a large one means "
        "it could well be. It is not the probability that the structure is real. roletrail's p-values come "
        "from random draws, so they are never exactly 0: the smallest possible is 1 / (draws + 1).",
        "p = (1 + b) / (m + 1), where b counts the m random draws whose statistic is at least as extreme as "
        "the observed one.",
        (_PS, f"{_WF}, sec. 10.4 (testing blockmodels against random data)"),
        also=("p value", "pvalue", "p", "permutation test", "significance", "significant"),
        see=("q-value", "no clear structure"),
    ),
    Entry(
        "q-value",
        "a p-value corrected for testing many periods at once",
        "A p-value adjusted for the number of tests made. With 20 periods tested, about one will reach "
        "p < 0.05 by chance alone; q-values correct for that. Among all results with q below 0.05, at most "
        "about 5% are expected to be false discoveries (the false discovery rate).",
        "sort the m p-values, p_(1) ≤ … ≤ p_(m); then q_(i) = min over j ≥ i of min(1, m · p_(j) / j) "
        "(Benjamini-Hochberg).",
        (_BH,),
        also=("q value", "qvalue", "q", "false discovery rate", "fdr", "benjamini-hochberg", "bh",
              "multiple testing"),
        see=("p-value", "no clear structure"),
    ),
    Entry(
        "no clear structure",
        "the pattern could be chance, so no structure is named",
        "What roletrail says when a period's image fits its closest ideal structure no better than random "
        "images with the same number of ties do. It does not mean the network has no ties; it means the "
        "pattern could be chance, so no type is named for that period and no change of structure is "
        "reported to or from it.",
        "said when the structure's q-value (or p-value, where there is a single test) exceeds α = 0.05.",
        (f"{_WF}, sec. 10.4", _BH),
        also=("unclear", "not significant", "no structure"),
        see=("ideal structure", "p-value", "q-value"),
    ),
)

GLOSSARY: dict[str, Entry] = {entry.term: entry for entry in _ENTRIES}


def normalise(text: str) -> str:
    """Lower case, hyphens and underscores as spaces, single spaces: "Core_Periphery" -> "core periphery"."""
    return " ".join(re.sub(r"[-_]+", " ", str(text).lower()).split())


_INDEX: dict[str, str] = {}
for _entry in _ENTRIES:
    for _name in (_entry.term, *_entry.also):
        _INDEX.setdefault(normalise(_name), _entry.term)


def terms() -> list[str]:
    """Every term, in the glossary's order (the order of the report's glossary)."""
    return list(GLOSSARY)


def suggest(text: str, n: int = 3) -> list[str]:
    """The terms closest to ``text`` in spelling, best first.

    Each term and each of its other names is scored by difflib's similarity
    ratio with ``text``, and a one-word ``text`` also against each word of a
    name (so "densty" finds "density correlation" as well as "block").
    """
    key = normalise(text)
    if not key:
        return []
    one_word = len(key.split()) == 1
    best: dict[str, float] = {}
    for name, term in _INDEX.items():
        score = difflib.SequenceMatcher(None, key, name).ratio()
        if one_word:
            score = max([score] + [0.95 * difflib.SequenceMatcher(None, key, w).ratio() for w in name.split()])
        best[term] = max(best.get(term, 0.0), score)
    ranked = sorted((t for t, v in best.items() if v >= 0.6), key=lambda t: -best[t])
    return ranked[:n]


def lookup(text: str) -> Entry:
    """The entry for a term or one of its other names; a :class:`UsageError` with suggestions if unknown."""
    key = normalise(text)
    if key in _INDEX:
        return GLOSSARY[_INDEX[key]]
    close = suggest(text)
    hint = f"closest: {', '.join(close)}; " if close else ""
    raise UsageError(f"no entry for {text!r}; {hint}roletrail explain (without a term) lists them all")


def as_text(entry: Entry, width: int = 80) -> str:
    """An entry as plain text for a terminal, wrapped to ``width`` columns."""
    import textwrap

    width = max(40, int(width))

    def block(label: str, text: str) -> list[str]:
        return textwrap.wrap(text, width=width, initial_indent=label, subsequent_indent=" " * len(label))

    lines = [entry.term, ""]
    lines += textwrap.wrap(entry.plain, width=width)
    if entry.formula:
        lines += [""] + block("Formula: ", entry.formula)
    lines.append("")
    for i, source in enumerate(entry.sources):
        lines += block("Source:  " if i == 0 else "         ", source)
    if entry.see:
        lines += [""] + block("See also: ", ", ".join(entry.see))
    return "\n".join(lines)
