"""End to end on synthetic samples: the grain count and the boundary network against truth.

The oracle is inclination.synthetic: Voronoi grains (with twin lamellae) sectioned on a
square or hexagonal grid, 0.5° orientation noise, the true region of every point known.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from skimage.measure import label as sk_label

from inclination import synthetic
from inclination.crystal.symmetry import disorientation_angle_deg
from inclination.grains import segment_grains
from inclination.network import boundary_network

MIN_PIXELS = 8


def _neighbour_pairs(shape, grid):
    """Flat index pairs of neighbouring points, written here from conventions §1."""
    h, w = shape
    idx = np.arange(h * w).reshape(h, w)
    a, b = [idx[:, :-1].ravel()], [idx[:, 1:].ravel()]
    if grid == "square":
        a.append(idx[:-1].ravel())
        b.append(idx[1:].ravel())
    else:
        # Odd rows shifted right: row i+1 neighbours are columns j-1, j below an even row
        # and j, j+1 below an odd row.
        for i in range(h - 1):
            cols = np.arange(w)
            for dj in (-1, 0) if i % 2 == 0 else (0, 1):
                ok = (cols + dj >= 0) & (cols + dj < w)
                a.append(idx[i, cols[ok]])
                b.append(idx[i + 1, cols[ok] + dj])
    return np.concatenate(a), np.concatenate(b)


def resolvable_truth(sample, micro, threshold_deg):
    """The true grains a segmentation at threshold_deg can see, as an (H, W) id image.

    Connected pieces of the true regions (a lamella cuts its parent's section in two),
    with touching pieces joined when their true disorientation is below the threshold
    (the generator may draw neighbours 2-3° apart: one grain at a 5° threshold).
    """
    region = np.where(sample.phase != 0, sample.grain_id, 0)
    h, w = region.shape
    if sample.grid == "square":
        pieces = sk_label(region, connectivity=1, background=0).ravel()
    else:
        pieces = true_pieces(region, sample.grid).ravel()
    a, b = _neighbour_pairs((h, w), sample.grid)
    flat = region.ravel()
    touch = (pieces[a] != pieces[b]) & (flat[a] > 0) & (flat[b] > 0)
    pa, pb = pieces[a][touch], pieces[b][touch]
    ra, rb = flat[a][touch], flat[b][touch]
    close = np.zeros(pa.size, bool)
    same_phase = micro.region_phase[ra - 1] == micro.region_phase[rb - 1]
    for ph in micro.phases:
        sel = same_phase & (micro.region_phase[ra - 1] == ph.id)
        close[sel] = (
            disorientation_angle_deg(
                micro.region_quat[ra[sel] - 1], micro.region_quat[rb[sel] - 1], ph.laue
            )
            < threshold_deg
        )
    n = pieces.max() + 1
    graph = coo_matrix((np.ones(close.sum()), (pa[close], pb[close])), shape=(n, n))
    _, comp = connected_components(graph, directed=False)
    return np.where(pieces > 0, comp[pieces] + 1, 0).reshape(h, w)


def true_pieces(region, grid):
    """Connected pieces of each true region: (H, W) piece ids, 0 where region is 0.

    Square grid: skimage.measure.label (4-connectivity). Hexagonal grid: components of
    the graph of equal-region neighbours, written here from conventions §1 (odd rows
    shifted right: row i+1 neighbours are columns j-1, j on even rows, j, j+1 on odd).
    """
    if grid == "square":
        return sk_label(region, connectivity=1, background=0)
    h, w = region.shape
    a, b = _neighbour_pairs((h, w), grid)
    flat = region.ravel()
    same = (flat[a] == flat[b]) & (flat[a] > 0)
    graph = coo_matrix((np.ones(same.sum()), (a[same], b[same])), shape=(h * w, h * w))
    _, comp = connected_components(graph, directed=False)
    return np.where(region > 0, comp.reshape(h, w) + 1, 0)


@pytest.mark.parametrize("grid", ["square", "hexagonal"])
@pytest.mark.parametrize("seed", [1, 2])
def test_grain_count_within_two_percent_of_truth(grid, seed):
    micro = synthetic.make_microstructure(box_um=(200, 200, 40), n_grains=150, twins=20, rng=seed)
    sample = synthetic.sample_map(micro, step_um=1.0, rng=seed, grid=grid, noise_deg=0.5)
    omap = synthetic.as_orientation_map(sample)
    gm = segment_grains(omap, micro.phases, min_pixels=MIN_PIXELS)
    truth_image = resolvable_truth(sample, micro, 5.0)
    _, area = np.unique(truth_image[truth_image > 0], return_counts=True)
    truth = int((area >= MIN_PIXELS).sum())
    assert abs(gm.n_grains - truth) <= 0.02 * truth, (gm.n_grains, truth)
    # Each detected grain lies in one true region (purity of the segmentation).
    lab = gm.labels.ravel()
    tru = truth_image.ravel()
    inside = lab > 0
    key = lab[inside].astype(np.int64) * (tru.max() + 1) + tru[inside]
    pairs, counts = np.unique(key, return_counts=True)
    best = np.zeros(gm.n_grains + 1)
    np.maximum.at(best, pairs // (tru.max() + 1), counts)
    assert best[1:].sum() / inside.sum() > 0.995
    net = boundary_network(omap, gm, micro.phases)
    assert net.n_chains > gm.n_grains  # a planar network: more boundaries than grains
    assert np.all(net.grain_a < net.grain_b)
    assert np.all(np.isfinite(net.misorientation_deg))
    # Every boundary chain's misorientation exceeds the 5° segmentation threshold.
    assert net.misorientation_deg.min() > 5.0
