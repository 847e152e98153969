"""Block tables, images and fit measures checked on data sets with a published partition.

Every check names its outside source beside it.  The data are the ones networkx
ships, so the values are reproducible by anyone:

* Zachary's karate club (Zachary, W. W. 1977, "An information flow model for
  conflict and fission in small groups", Journal of Anthropological Research 33,
  452-473).  The partition is the published split of the club: networkx's node
  attribute ``club`` is, by networkx's own documentation, the "Club After Split
  From Data" column of Zachary's Table 3 (verified in the networkx 3.x reference
  for ``karate_club_graph``).  34 members, 78 ties, two factions of 17.
* Padgett's Florentine families, marriage ties (Breiger, R. L. & Pattison, P. E.
  1986, "Cumulated social roles: the duality of persons and their algebras",
  Social Networks 8, 215-256, as cited by networkx's ``florentine_families_graph``).

The expected values come from reference libraries (networkx for edge counts,
cut sizes and densities; scipy.stats for the correlation and the binomial test)
or from counting the definition cell by cell; none is typed in from our own
output.  Each check is also run once against a plausible wrong implementation
(an "imitation") to show that it can fail.
"""

from __future__ import annotations

import itertools

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats as sps

from tests.blockmodel.test_regular_definitions import _regular
from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.equivalence import maximal_regular_partition, structural_distances
from tracker.blockmodel.goodness import density_correlation, inconsistencies
from tracker.blockmodel.image import BACKGROUND_LEVEL, image
from tracker.blockmodel.partition import Partition
from tracker.structures.coreperiphery import discrete_core_periphery
from tracker.structures.ideal import closest_ideal, density_image


def _karate():
    """Zachary's club, unweighted (any tie counts), and the published split (0 = Mr. Hi, 1 = Officer)."""
    weighted = nx.karate_club_graph()
    graph = nx.Graph(weighted.edges())  # drop the interaction counts: a tie is a tie
    graph.add_nodes_from(weighted)
    labels = np.array([0 if weighted.nodes[v]["club"] == "Mr. Hi" else 1 for v in sorted(graph)])
    return graph, labels


def _stats(graph, labels):
    matrix = nx.to_scipy_sparse_array(graph, nodelist=sorted(graph), weight=None)
    return block_stats([matrix], [False], Partition(labels, int(labels.max()) + 1))


def _networkx_table(graph, labels):
    """Ties, possible ties and density per block, from networkx only (undirected: unordered pairs)."""
    groups = [set(np.flatnonzero(labels == k).tolist()) for k in range(int(labels.max()) + 1)]
    n_pos = len(groups)
    ties = np.zeros((n_pos, n_pos))
    possible = np.zeros((n_pos, n_pos))
    density = np.zeros((n_pos, n_pos))
    for k, l in itertools.product(range(n_pos), repeat=2):
        if k == l:
            sub = graph.subgraph(groups[k])
            ties[k, k] = sub.number_of_edges()
            possible[k, k] = len(groups[k]) * (len(groups[k]) - 1) / 2
            density[k, k] = nx.density(sub)
        else:
            ties[k, l] = nx.cut_size(graph, groups[k], groups[l])
            possible[k, l] = len(groups[k]) * len(groups[l])
            density[k, l] = ties[k, l] / possible[k, l]
    return ties, possible, density


def _check_block_table(stats, graph, labels):
    ties, possible, density = _networkx_table(graph, labels)
    np.testing.assert_array_equal(stats.ties[0], ties)
    np.testing.assert_array_equal(stats.possible[0], possible)
    np.testing.assert_allclose(stats.density[0], density, rtol=1e-12)
    assert stats.network_density[0] == pytest.approx(nx.density(graph), rel=1e-12)


def test_karate_data_are_the_published_ones():
    # Source: Zachary (1977): 34 members, 78 ties, a split into two factions; the
    # 17/17 split follows from networkx's "club" attribute (Table 3 of the paper;
    # the 17/17 count is our reading of the shipped attribute, not a quoted value).
    graph, labels = _karate()
    assert graph.number_of_nodes() == 34 and graph.number_of_edges() == 78
    assert np.bincount(labels).tolist() == [17, 17]


def test_karate_block_table_equals_networkx():
    # Source: networkx (subgraph edge counts, cut_size, density) on Zachary's club
    # split; the block table's definition (ties, possible pairs n_k (n_k - 1) / 2 in a
    # diagonal block of an undirected relation, n_k n_l between blocks) is Wasserman &
    # Faust (1994, Cambridge UP, 1st ed., ch. 10; section from memory).
    graph, labels = _karate()
    stats = _stats(graph, labels)
    _check_block_table(stats, graph, labels)
    # the two factions are much denser inside than between (Zachary's finding)
    assert stats.density[0, 0, 0] > 5 * stats.density[0, 0, 1]

    # imitation: counting the diagonal blocks' possible ties as n_k^2 / 2 (self-pairs
    # included) must fail the same check
    wrong = _stats(graph, labels)
    object.__setattr__(wrong, "possible", wrong.possible + np.diag(wrong.sizes // 2)[None])
    with pytest.raises(AssertionError):
        _check_block_table(wrong, graph, labels)


def _expected_images(graph, labels):
    """Each criterion applied to the networkx block table, written out from its definition."""
    ties, possible, density = _networkx_table(graph, labels)
    alpha = nx.density(graph)
    n_blocks = np.triu(np.ones_like(ties)).sum()  # undirected: blocks k <= l
    tail = np.vectorize(
        lambda t, p: sps.binomtest(int(t), int(p), alpha, alternative="greater").pvalue if t > 0 else 1.0
    )(ties, possible)
    return {
        "zero-block": (ties > 0).astype(int),  # any tie
        "one-block": (ties == possible).astype(int),  # complete
        "density": ((density >= alpha) & (ties > 0)).astype(int),  # alpha = network density
        "above-background": ((tail <= BACKGROUND_LEVEL / n_blocks) & (density > alpha)).astype(int),
    }


def test_karate_images_under_each_criterion():
    # Sources: the zero-block (lean fit), one-block and alpha-density criteria as
    # defined in Wasserman & Faust (1994, Cambridge UP, 1st ed., sec. 10.2; section
    # from memory), with alpha the whole-network density; the above-background
    # criterion's binomial tail from scipy.stats.binomtest (one-sided, "greater"),
    # Bonferroni over the 3 distinct blocks of an undirected 2-position model.
    graph, labels = _karate()
    stats = _stats(graph, labels)
    expected = _expected_images(graph, labels)
    for criterion, want in expected.items():
        np.testing.assert_array_equal(image(stats, criterion)[0], want, err_msg=criterion)
    # Worked out: 11 ties cross the split, so zero-block calls every block tied and
    # no block is complete; under alpha density (78/561 = 0.139) and above the
    # background only the factions themselves (35/136 and 32/136) are tied.
    assert expected["zero-block"].tolist() == [[1, 1], [1, 1]]
    assert expected["one-block"].tolist() == [[0, 0], [0, 0]]
    assert expected["density"].tolist() == [[1, 0], [0, 1]]
    assert expected["above-background"].tolist() == [[1, 0], [0, 1]]

    # A chosen alpha (W&F allow any threshold): at 0.25 only Mr. Hi's faction
    # (35/136 = 0.257) is tied.  Imitation: densities over n_k^2 / 2 pairs (self-pairs
    # counted) give 35/144.5 = 0.242 < 0.25 and would image that faction 0.
    assert image(stats, "density", alpha=0.25)[0].tolist() == [[1, 0], [0, 0]]
    assert stats.ties[0, 0, 0] / (17**2 / 2) < 0.25 <= stats.ties[0, 0, 0] / stats.possible[0, 0, 0]


def _pearson_over_pairs(graph, labels):
    """scipy.stats.pearsonr between each unordered pair's tie and its block's density."""
    nodes = sorted(graph)
    adj = nx.to_numpy_array(graph, nodelist=nodes, weight=None)
    _, _, density = _networkx_table(graph, labels)
    rows, cols = np.triu_indices(len(nodes), 1)
    return sps.pearsonr(adj[rows, cols], density[labels[rows], labels[cols]]).statistic


def test_karate_density_correlation_equals_scipy_pearsonr():
    # Source: scipy.stats.pearsonr over the 561 unordered pairs of Zachary's club
    # (tie 1/0 against the density of the pair's block), the statistic's definition
    # (Wasserman & Faust 1994, 1st ed.: correlation of the data with the
    # density matrix; section from memory).
    graph, labels = _karate()
    reference = _pearson_over_pairs(graph, labels)
    assert density_correlation(_stats(graph, labels)) == pytest.approx(reference, abs=1e-12)
    assert 0.25 < reference < 0.35  # measured 0.302: two factions explain part of the ties

    # imitation: the same correlation over all n^2 cells, diagonal included as
    # non-ties, is a different number, and so is the one for a wrong partition
    adj = nx.to_numpy_array(graph, nodelist=sorted(graph), weight=None)
    _, _, density = _networkx_table(graph, labels)
    with_diagonal = sps.pearsonr(adj.ravel(), density[labels[:, None], labels[None, :]].ravel()).statistic
    assert abs(with_diagonal - reference) > 1e-3
    shuffled = np.random.default_rng(0).permutation(labels)
    assert abs(density_correlation(_stats(graph, shuffled)) - reference) > 0.1


def test_karate_normalised_inconsistencies_counted_cell_by_cell():
    # Source: the block inconsistencies of generalized blockmodeling (Doreian,
    # Batagelj & Ferligoj 2005, Generalized Blockmodeling, Cambridge UP; chapter
    # and page from memory): a null block's are its ties, a complete block's its
    # missing ties; divided by the block's cells so that large blocks do not
    # dominate.  Counted here on the adjacency matrix cell by cell, for the
    # cohesive-subgroups ideal (complete diagonal, null elsewhere) of the split.
    graph, labels = _karate()
    adj = nx.to_numpy_array(graph, nodelist=sorted(graph), weight=None)
    expected = 0.0
    for k, l in itertools.product(range(2), repeat=2):
        rows, cols = np.flatnonzero(labels == k), np.flatnonzero(labels == l)
        block = adj[np.ix_(rows, cols)]
        cells = ~np.eye(len(rows), dtype=bool) if k == l else np.ones(block.shape, dtype=bool)
        wrong_cells = (block[cells] == 0) if k == l else (block[cells] == 1)
        expected += wrong_cells.sum() / cells.sum()
    stats = _stats(graph, labels)
    img = density_image(stats.ties[0], stats.possible[0], relative=False)
    fit = next(f for f in closest_ideal(img) if f.ideal == "cohesive-subgroups")
    assert fit.mismatches == pytest.approx(expected, abs=1e-12)
    # worked out: (1 - 35/136) + (1 - 32/136) + 2 * 11/289
    assert expected == pytest.approx(2 - 67 / 136 + 22 / 289, abs=1e-12)

    # imitation: the raw counts (not divided by the block's cells) are another number
    raw = (stats.possible[0] - stats.ties[0]).trace() + 2 * stats.ties[0, 0, 1]
    assert abs(raw - fit.mismatches) > 1


def test_karate_inconsistencies_with_each_image_counted_cell_by_cell():
    # Source: the criterion function of Doreian, Batagelj & Ferligoj (2005, Cambridge
    # UP; chapter and page from memory): missing ties of blocks imaged 1 plus present
    # ties of blocks imaged 0, each unordered pair once; counted here on the adjacency
    # matrix pair by pair for the images of the published split.
    graph, labels = _karate()
    adj = nx.to_numpy_array(graph, nodelist=sorted(graph), weight=None)
    rows, cols = np.triu_indices(34, 1)
    tie = adj[rows, cols] == 1
    stats = _stats(graph, labels)
    for criterion in ("zero-block", "one-block", "density"):
        img = image(stats, criterion)
        one = img[0][labels[rows], labels[cols]] == 1
        expected = int(np.sum(one & ~tie) + np.sum(~one & tie))
        assert inconsistencies(stats, img).tolist() == [expected], criterion
    # worked out: zero-block images every block 1, so every absent pair counts:
    # 561 - 78 = 483; alpha density: (136 - 35) + (136 - 32) absent inside + 11 across
    assert inconsistencies(stats, image(stats, "zero-block")).tolist() == [483]
    assert inconsistencies(stats, image(stats, "density")).tolist() == [216]
    # imitation: counting the ordered pairs of an undirected relation doubles it
    ordered = np.where(image(stats, "density")[0] == 1, stats.possible[0] - stats.ties[0], stats.ties[0]).sum()
    assert ordered != 216


def test_karate_factions_are_named_cohesive_subgroups():
    # Source: Zachary (1977): the club split into two factions with few ties
    # between them; the cohesive-subgroups ideal image (ties inside positions only)
    # of Wasserman & Faust (1994, 1st ed., sec. 10.3; section from memory).
    graph, labels = _karate()
    stats = _stats(graph, labels)
    alpha_image = image(stats, "density")[0]
    best = closest_ideal(alpha_image)[0]
    assert (best.ideal, best.mismatches) == ("cohesive-subgroups", 0)
    assert closest_ideal(density_image(stats.ties[0], stats.possible[0]))[0].ideal == "cohesive-subgroups"
    # under zero-block the 11 crossing ties fill every block: the all-1 image, which
    # the textbook criterion cannot tell from a core-periphery pattern
    assert closest_ideal(image(stats, "zero-block")[0])[0].ideal != "cohesive-subgroups"


def test_two_position_core_periphery_image_of_borgatti_everett():
    # Source: Borgatti & Everett (1999), Social Networks 21, 375-395: the
    # two-position image of a core-periphery structure is core->core 1,
    # core->periphery 1, periphery->core 1, periphery->periphery 0 (the image
    # [[1, 1], [1, 0]] as reproduced from the paper's 10-actor example in a
    # secondary text; the paper's page from memory).
    fit = closest_ideal(np.array([[1, 1], [1, 0]]))[0]
    assert (fit.ideal, fit.mismatches, fit.roles) == ("core-periphery", 0, {0: "core", 1: "periphery"})
    # imitation: the reversed pattern (periphery dense) puts the core on the other position
    fit = closest_ideal(np.array([[0, 1], [1, 1]]))[0]
    assert fit.roles == {0: "periphery", 1: "core"}


def test_florentine_core_equals_brute_force_with_scipy():
    # Source: brute force of Borgatti & Everett's (1999) discrete model on the
    # Florentine marriage network shipped by networkx (15 families): every core of
    # 1..13 families (2**15 cores), correlation of the ties with the ideal pattern
    # (delta_ij = 1 if i or j is in the core) over the 105 unordered pairs; the best
    # core's value is recomputed with scipy.stats.pearsonr.
    graph = nx.florentine_families_graph()
    nodes = sorted(graph)
    n = len(nodes)
    adj = nx.to_numpy_array(graph, nodelist=nodes, weight=None)
    rows, cols = np.triu_indices(n, 1)
    x = adj[rows, cols]
    codes = np.arange(1, 2**n - 1)
    core = ((codes[:, None] >> np.arange(n)) & 1).astype(bool)
    core = core[core.sum(axis=1) <= n - 2]
    pattern = (core[:, rows] | core[:, cols]).astype(float)
    xc = x - x.mean()
    pc = pattern - pattern.mean(axis=1, keepdims=True)
    r = (pc @ xc) / np.sqrt((pc**2).sum(axis=1) * (xc**2).sum())
    best = int(np.nanargmax(r))
    reference = sps.pearsonr(x, pattern[best]).statistic
    assert reference == pytest.approx(r[best], abs=1e-12)

    found, r_found = discrete_core_periphery(sp.csr_array(adj), seed=0)
    assert r_found == pytest.approx(reference, abs=1e-12)
    assert sps.pearsonr(x, (found[rows] | found[cols]).astype(float)).statistic == pytest.approx(reference, abs=1e-12)
    assert "Medici" in {nodes[i] for i in np.flatnonzero(found)}  # the best-connected family

    # imitation: a pattern without core-periphery ties (only core-core = 1) is a
    # different model and reaches a different best correlation
    core_only = (core[:, rows] & core[:, cols]).astype(float)
    co = core_only - core_only.mean(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        r_core_only = (co @ xc) / np.sqrt((co**2).sum(axis=1) * (xc**2).sum())
    assert abs(np.nanmax(r_core_only) - reference) > 1e-3


def test_levels_of_a_directed_hierarchy_are_its_regular_classes():
    # Source: the definition of regular equivalence (White & Reitz 1983, Social
    # Networks 5, 193-234), tested on the result; the levels of a chain of command
    # as the classic example of regular but not structural equivalence (Borgatti &
    # Everett 1992, Sociological Methodology 22; the example cited from memory).
    # The tree is networkx's balanced_tree(2, 3), ties from each node to its children.
    tree = nx.bfs_tree(nx.balanced_tree(2, 3), 0)
    nodes = sorted(tree)
    depth = nx.shortest_path_length(tree, 0)
    levels = np.array([depth[v] for v in nodes])
    matrix = nx.to_scipy_sparse_array(tree, nodelist=nodes, weight=None)
    found = maximal_regular_partition([matrix], [True])
    assert len(set(zip(found.tolist(), levels.tolist()))) == len(set(found.tolist())) == 4
    dense = matrix.toarray()
    assert _regular(levels, [(dense, True)])
    for a, b in itertools.combinations(range(4), 2):  # no two levels can be merged
        assert not _regular(np.where(levels == b, a, levels), [(dense, True)])
    # imitation: structural equivalence splits each level by parent (siblings only)
    assert np.unique(structural_distances([matrix], [True]).round(9), axis=0).shape[0] > 4
