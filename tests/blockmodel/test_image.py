"""Image criteria on hand-built blocks (Wasserman & Faust 1994, sec. 10.2 definitions)."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp

from tracker.blockmodel.blocks import block_stats
from tracker.blockmodel.image import CRITERIA, image, perfect_fit
from tracker.blockmodel.partition import Partition
from tracker.errors import UsageError

# Positions: A = {0, 1, 2}, B = {3, 4, 5, 6}.
LABELS = np.array([0, 0, 0, 1, 1, 1, 1])


def _four_blocks() -> np.ndarray:
    """A complete block, a sparse block, a denser block and an empty one."""
    a = np.zeros((7, 7))
    a[:3, :3] = 1  # A -> A complete: 6 of 6
    a[0, 3] = 1  # A -> B: 1 of 12
    a[3, 0] = a[3, 1] = a[4, 0] = a[4, 1] = a[5, 2] = a[6, 2] = 1  # B -> A: 6 of 12
    np.fill_diagonal(a, 0)
    return a  # B -> B empty


def _stats(a, directed=True):
    return block_stats([sp.csr_array(a)], [directed], Partition(LABELS, 2))


def test_zero_block_and_one_block():
    stats = _stats(_four_blocks())
    # Zero-block (lean fit): 1 unless the block has no tie (W&F 1994, sec. 10.2.2).
    assert image(stats, "zero-block")[0].tolist() == [[1, 1], [1, 0]]
    # One-block: 1 only for complete blocks (W&F 1994, sec. 10.2.2).
    assert image(stats, "one-block")[0].tolist() == [[1, 0], [0, 0]]


def test_density_criterion_default_alpha_is_network_density():
    a = _four_blocks()
    stats = _stats(a)
    g = nx.from_numpy_array(a, create_using=nx.DiGraph)
    # Reference library: networkx.density of the same graph, 13 / 42 = 0.31.
    assert stats.network_density[0] == pytest.approx(nx.density(g))
    # Densities: A->A 1, A->B 1/12, B->A 1/2, B->B 0; alpha = 13/42.
    assert image(stats, "density")[0].tolist() == [[1, 0], [1, 0]]
    assert image(stats, "density", alpha=0.6)[0].tolist() == [[1, 0], [0, 0]]
    assert image(stats, "density", alpha=0.5)[0].tolist() == [[1, 0], [1, 0]]  # >= alpha
    assert image(stats, "density", alpha=[0.05])[0].tolist() == [[1, 1], [1, 0]]


def test_density_criterion_undirected_default_alpha():
    g = nx.karate_club_graph()  # shipped with networkx
    a = nx.to_scipy_sparse_array(g, nodelist=sorted(g), weight=None, dtype=float)
    labels = np.array([0 if g.nodes[v]["club"] == "Mr. Hi" else 1 for v in sorted(g)])
    stats = block_stats([a], [False], Partition(labels, 2))
    assert stats.network_density[0] == pytest.approx(nx.density(g))
    dens = stats.density[0]
    # Brute force over the definition: block (k, l) is 1 iff density >= nx.density(g).
    expected = (dens >= nx.density(g)).astype(int)
    np.testing.assert_array_equal(image(stats, "density")[0], expected)
    # The two factions are denser inside than the network (Zachary's data,
    # known fact about the club split): the image is the cohesive-subgroups pattern.
    assert image(stats, "density")[0].tolist() == [[1, 0], [0, 1]]


def test_max_value_criterion():
    a = np.zeros((7, 7))
    a[0, 1] = 1
    a[0, 3] = 4
    a[3, 0] = 2
    a[4, 5] = 1
    stats = _stats(a)
    # Default cut: median of the non-zero values, numpy.median([1, 4, 2, 1]) = 1.5.
    assert stats.network_median_positive[0] == np.median([1, 4, 2, 1])
    # Block maxima: A->A 1, A->B 4, B->A 2, B->B 1.
    assert image(stats, "max-value")[0].tolist() == [[0, 1], [1, 0]]
    assert image(stats, "max-value", cut=3)[0].tolist() == [[0, 1], [0, 0]]
    assert image(stats, "max-value", cut=1)[0].tolist() == image(stats, "zero-block")[0].tolist()


def test_max_value_on_binary_data_is_zero_block():
    stats = _stats(_four_blocks())
    np.testing.assert_array_equal(image(stats, "max-value"), image(stats, "zero-block"))


def test_mean_value_criterion_uses_mean_of_off_diagonal_values():
    a = np.zeros((7, 7))
    a[:3, :3] = 2
    a[3, 0] = 9
    a[4, 5] = 1
    np.fill_diagonal(a, 0)
    stats = _stats(a)
    # Reference: numpy mean of all off-diagonal cells of the dense matrix.
    off = a[~np.eye(7, dtype=bool)]
    assert stats.network_mean[0] == pytest.approx(off.mean())
    # Block means: A->A 12/6 = 2, A->B 0, B->A 9/12 = 0.75, B->B 1/12; network mean 22/42.
    assert image(stats, "mean-value")[0].tolist() == [[1, 0], [1, 0]]


def test_singleton_diagonal_block_is_zero_even_at_alpha_zero():
    a = sp.csr_array(np.array([[0, 1, 1], [1, 0, 0], [1, 0, 0]], dtype=float))
    stats = block_stats([a], [False], Partition(np.array([0, 1, 1]), 2))
    for criterion in CRITERIA:
        kwargs = {"alpha": 0.0} if criterion == "density" else {}
        assert image(stats, criterion, **kwargs)[0, 0, 0] == 0


def test_multi_relation_thresholds():
    a = _four_blocks()
    b = np.zeros((7, 7))
    b[3:, 3:] = 1
    np.fill_diagonal(b, 0)
    stats = block_stats([sp.csr_array(a), sp.csr_array(b)], [True, True], Partition(LABELS, 2))
    img = image(stats, "density", alpha=[0.6, 0.2])
    assert img.shape == (2, 2, 2)
    assert img[1].tolist() == [[0, 0], [0, 1]]
    with pytest.raises(UsageError):
        image(stats, "density", alpha=[0.1, 0.2, 0.3])


def test_bad_criterion_and_alpha_raise_usage_error():
    stats = _stats(_four_blocks())
    with pytest.raises(UsageError, match="zero-block"):
        image(stats, "lean")
    with pytest.raises(UsageError, match="alpha"):
        image(stats, "density", alpha=1.5)


def test_perfect_fit():
    # Exact structural equivalence (Lorrain & White 1971): every block 0 or complete.
    a = np.zeros((7, 7))
    a[:3, :3] = 1
    a[3:, :3] = 1
    np.fill_diagonal(a, 0)
    assert perfect_fit(_stats(a))
    assert not perfect_fit(_stats(_four_blocks()))
    # Image-independent: a perfect fit has one-block == zero-block.
    stats = _stats(a)
    np.testing.assert_array_equal(image(stats, "one-block"), image(stats, "zero-block"))
