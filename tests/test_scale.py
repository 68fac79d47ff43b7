"""Faster paths for large regions give the answers of the plain paths.

Consistency checks (the tool against itself, on purpose): the one-pass enclave counts of
the sensitivity sweeps against the full enclave stage, and the raster overview of large
regions. Reference tests of contiguity and edge lengths are in test_weights.py.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from coverage_audit.enclaves import count_enclaves, find_enclaves
from coverage_audit.errors import IslandWarning
from coverage_audit.report import charts
from coverage_audit.synthetic import densify_independently, tessellation
from coverage_audit.weights import build_area_graph

SEED = 20240611


@pytest.fixture(scope="module")
def region():
    cells = tessellation(900, seed=SEED)
    geoms = densify_independently(np.asarray(cells.geometry.array), vertices=60, seed=SEED)
    ids = cells["geoid"].to_numpy(dtype=object)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", IslandWarning)
        graph = build_area_graph(geoms, ids)
    rng = np.random.default_rng(SEED)
    population = rng.integers(100, 5000, ids.size).astype(float)
    population[rng.choice(ids.size, 20, replace=False)] = 0.0
    white = np.floor(population * rng.uniform(0.2, 0.9, ids.size))
    # A smooth field so that served and unserved areas come in patches, with pockets.
    x, y = cells["x"].to_numpy(), cells["y"].to_numpy()
    field = np.sin(x / 9_000.0) * np.cos(y / 7_000.0) + rng.normal(0, 0.35, ids.size)
    return geoms, ids, graph, population, white, field


@pytest.mark.parametrize("transparent_zero", [False, True])
def test_one_pass_counts_equal_the_enclave_stage(region, transparent_zero):
    # Consistency check: count_enclaves (sensitivity sweeps) against find_enclaves.
    geoms, ids, graph, population, white, field = region
    transparent = population <= 0 if transparent_zero else None
    served_sets = [field >= t for t in np.linspace(-1.0, 1.0, 9)]
    for min_surround in (0.5, 0.75, 1.0):
        counts = count_enclaves(
            served_sets, population, graph, min_surround=min_surround, transparent=transparent
        )
        expected = [
            len(
                find_enclaves(
                    geoms,
                    ids,
                    served,
                    population,
                    {"white": white},
                    graph,
                    min_surround=min_surround,
                    transparent=transparent,
                    reference_group="white",
                    mc_draws=0,
                ).enclaves
            )  # fmt: skip
            for served in served_sets
        ]
        assert counts == expected
    assert max(expected) > 0  # the sweep does find pockets


def test_overview_of_a_large_region_is_a_raster_drawn_once():
    cells = tessellation(charts.RASTER_OVERVIEW_ABOVE + 200, seed=SEED)
    geoms = np.asarray(cells.geometry.array)
    served = np.random.default_rng(SEED).random(geoms.size) < 0.5
    layers = charts.RegionLayers.build(geoms, served)
    assert layers.image is not None and layers.image.ndim == 3
    # Both tones are painted (RGBA of REGION_GREY #d9d9d6 and SERVED_TONE #7f9cb8).
    rgb = {tuple(p) for p in layers.image[..., :3].reshape(-1, 3)[::97]}
    assert (0xD9, 0xD9, 0xD6) in rgb and (0x7F, 0x9C, 0xB8) in rgb
    svg = charts.overview_chart(layers)
    assert "<image" in svg
    locator = charts.enclave_locator_chart(
        layers, np.array([10, 11]), np.array([12]), label="E1", salt="t"
    )
    assert "<image" in locator and "<path" in locator
