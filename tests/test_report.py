"""Tests of the self-contained report page (coverage_audit.report.page and .charts)."""

from __future__ import annotations

import base64
import copy
import hashlib
import html
import importlib
import importlib.util
import io
import re
import subprocess
import sys
from pathlib import Path

import esda
import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
import shapely
from libpysal import examples
from libpysal.graph import Graph
from matplotlib.figure import Figure
from matplotlib.image import imread
from matplotlib.patches import PathPatch
from matplotlib.path import Path as MplPath

from coverage_audit import synthetic
from coverage_audit.errors import CoverageAuditError, InputError
from coverage_audit.report import charts, page
from coverage_audit.report.page import build_report, render_report


def _harness_name() -> str:
    """The browser harness module, whether tests/ is a package or a folder on sys.path."""
    try:
        return "tests.browser" if importlib.util.find_spec("tests.browser") else "browser"
    except ModuleNotFoundError:
        return "browser"


HARNESS = _harness_name()
pytest_plugins = [HARNESS]

SEED = 20260517
GROUPS = ["white_nh", "black_nh", "hispanic", "asian_nh", "minority"]
REFERENCE = "white_nh"
XSS = "<script>alert(1)</script>"
XSS_IMG = '<img src=x onerror="window.__caXss=1">'
RADIUS_M = 2_500.0
#: Agreement of a statistic recomputed from the same numbers: rounding only.
RTOL = 1e-10


# --- a fictional audit -------------------------------------------------------------------


def _enclave_cells(adjacency: sp.csr_matrix, served: np.ndarray, count: int) -> list[int]:
    """Served cells whose neighbours are all served, pairwise not adjacent (to unserve)."""
    degree = np.asarray(adjacency.sum(axis=1)).ravel()
    served_neighbours = adjacency @ served.astype(float)
    candidates = np.flatnonzero(served & (degree > 0) & (served_neighbours == degree))
    chosen: list[int] = []
    for c in candidates:
        if all(adjacency[c, d] == 0 for d in chosen):
            chosen.append(int(c))
        if len(chosen) == count:
            break
    return chosen


def make_inputs(n_areas: int = 150, *, seed: int = SEED, n_enclaves: int = 2) -> dict:
    """Fictional pipeline output for the report: areas with the pipeline's columns, a points
    footprint, exclusions, a manifest and a summary with the contract's keys.

    Covered fractions are exact overlays of the cells with the dissolved circles; the
    summary's coverage figures are hand-picked numbers chosen to exercise formatting.

    Kept hand-built on purpose (tests/test_report_real.py draws the report from real
    findings): it holds cases no real audit produces, a group with no rate at all (None
    throughout), markup in input text, and numbers at formatting boundaries, each asserted
    below as literal text.
    """
    rng = np.random.default_rng(seed)
    cells = synthetic.tessellation(n_areas, seed=seed)
    demo = synthetic.demographics(cells, seed=seed + 1)
    areas = gpd.GeoDataFrame({"geoid": cells["geoid"]}, geometry=cells.geometry, crs=cells.crs)
    areas["population"] = demo["pop_total"].to_numpy()
    for g in ("white_nh", "black_nh", "hispanic", "asian_nh"):
        areas[g] = demo[f"pop_{g}"].to_numpy()
    areas["minority"] = areas["population"] - areas["white_nh"]
    for g in GROUPS:
        areas[f"{g}_share"] = areas[g] / areas["population"]
    white = areas["white_nh_share"].to_numpy()
    sites = synthetic.service_points(
        cells, max(6, n_areas // 12), seed=seed + 2, weight=0.05 + white**3
    )
    reach = shapely.union_all(shapely.buffer(sites.geometry.to_numpy(), RADIUS_M, quad_segs=16))
    geoms = areas.geometry.to_numpy()
    fraction = shapely.area(shapely.intersection(geoms, reach)) / shapely.area(geoms)
    graph = Graph.build_contiguity(areas, rook=False)
    adjacency = sp.csr_matrix(graph.sparse)
    served = fraction >= 0.5
    enclave_cells = _enclave_cells(adjacency, served, n_enclaves)
    assert len(enclave_cells) == n_enclaves, "fixture: not enough interior served cells"
    fraction[enclave_cells] = 0.1
    areas["covered_fraction"] = fraction
    areas["served"] = fraction >= 0.5
    _, dist = shapely.STRtree(sites.geometry.to_numpy()).query_nearest(
        shapely.point_on_surface(geoms), return_distance=True, all_matches=False
    )
    areas["nearest_site_m"] = dist
    income = demo["income_ratio"].to_numpy().astype(float)
    income[4] = np.nan
    areas["income_ratio"] = income
    areas["income_tier"] = np.select(
        [np.isnan(income), income < 50, income < 80, income < 120],
        ["unknown", "low", "moderate", "middle"],
        "upper",
    )
    areas["majority_minority"] = areas["minority_share"] > 0.5
    labels = np.array(["high-high", "low-low", "high-low", "low-high", "not significant"])
    areas["lisa_cluster"] = labels[rng.choice(5, len(areas), p=[0.1, 0.1, 0.05, 0.05, 0.7])]
    ids = areas["geoid"].to_numpy()
    enclave_id = np.full(len(areas), None, dtype=object)
    enclaves = []
    for k, cell in enumerate(enclave_cells):
        label = f"E{k + 1}"
        enclave_id[cell] = label
        ring = adjacency[cell].indices
        shares = {g: float(areas[g].iloc[cell] / areas["population"].iloc[cell]) for g in GROUPS}
        ring_pop = float(areas["population"].iloc[ring].sum())
        ring_shares = {g: float(areas[g].iloc[ring].sum() / ring_pop) for g in GROUPS}
        enclaves.append(
            {
                "id": label,
                "area_ids": [str(ids[cell])],
                "population": float(areas["population"].iloc[cell]) + 1000.0 * (n_enclaves - k),
                "surround_share": 1.0,
                "group_shares": shares,
                "ring_area_ids": sorted(ids[ring]),
                "ring_group_shares": ring_shares,
                "share_difference": {g: shares[g] - ring_shares[g] for g in GROUPS},
                "share_ratio": {g: shares[g] / ring_shares[g] for g in GROUPS},
                "contrast_share": shares["minority"],
                "mc_mean_contrast_share": 0.31,
                "income_tiers": {"upper": 1} if k else {"moderate": 1},
                "p_value": 0.004 + k / 100,
                "mc_draws": 999,
            }
        )
    areas["enclave_id"] = enclave_id
    areas["name"] = [f"Area {k}" for k in range(len(areas))]
    areas.loc[7, "name"] = XSS
    exclusions = pd.DataFrame(
        {
            "source": ["areas", "areas", "table"],
            "row": [12, 40, 3],
            "id": ["99001999990", XSS, None],
            "reason": ["empty geometry", "duplicate id", "no matching area"],
        }
    )
    y = areas["covered_fraction"].to_numpy()
    moran = esda.Moran(y, graph.transform("r"), permutations=0)
    summary = {
        "schema_version": 1,
        "title": "Fictional audit of the Lagoon Shire branch network",
        "areas": {"input": len(areas) + 3, "analysed": len(areas), "excluded": 3},
        "coverage": {
            "served_threshold": 0.5,
            "reference_group": REFERENCE,
            "comparison": "reference",
            "comparison_group": REFERENCE,
            "rate": 0.5512,
            "population": 512_345.0,
            "covered_population": 282_402.6,
            "areas": len(areas),
            "served_areas": int(areas["served"].sum()),
            "groups": {
                "white_nh": {
                    "population": 300_000.4,
                    "covered_population": 215_403.0,
                    "rate": 0.71801,
                    "served_area_rate": 0.7532,
                    "ratio": 1.0,
                    "served_area_ratio": 1.0,
                    "difference": 0.0,
                    "served_area_difference": 0.0,
                    "below_four_fifths": False,
                },
                "black_nh": {
                    "population": 90_210.0,
                    "covered_population": 34_567.8,
                    "rate": 0.41234,
                    "served_area_rate": 0.40011,
                    "ratio": 0.57428,
                    "served_area_ratio": 0.5312,
                    "difference": -0.30567,
                    "served_area_difference": -0.35309,
                    "below_four_fifths": True,
                },
                "hispanic": {
                    "population": 80_000.0,
                    "covered_population": 46_000.0,
                    "rate": 0.575,
                    "served_area_rate": 0.6025,
                    "ratio": 0.80083,
                    "served_area_ratio": 0.79993,
                    "difference": -0.14301,
                    "served_area_difference": -0.1507,
                    "below_four_fifths": False,
                },
                "asian_nh": {
                    "population": 30_000.0,
                    "covered_population": None,
                    "rate": None,
                    "served_area_rate": None,
                    "ratio": None,
                    "served_area_ratio": None,
                    "difference": None,
                    "served_area_difference": None,
                    "below_four_fifths": False,
                },
                "minority": {
                    "population": 212_345.0,
                    "covered_population": 98_765.0,
                    "rate": 0.46511,
                    "served_area_rate": 0.47,
                    "ratio": 0.64777,
                    "served_area_ratio": 0.624,
                    "difference": -0.2529,
                    "served_area_difference": -0.2832,
                    "below_four_fifths": True,
                },
            },
            "area_classes": {
                "all": {
                    "areas": len(areas),
                    "population": 512_345.0,
                    "rate": 0.5512,
                    "served_share": 0.52,
                    "served_population_share": 0.55,
                },
                "majority_minority": {
                    "areas": 41,
                    "population": 150_000.0,
                    "rate": 0.3333,
                    "served_share": 0.3,
                    "served_population_share": 0.31,
                },
                "not_majority_minority": {
                    "areas": 109,
                    "population": 362_345.0,
                    "rate": 0.6421,
                    "served_share": 0.61,
                    "served_population_share": 0.64,
                },
                "income_tiers": {
                    t: {
                        "areas": 30,
                        "population": 100_000.0,
                        "rate": r,
                        "served_share": r,
                        "served_population_share": r,
                    }
                    for t, r in (
                        ("low", 0.21),
                        ("moderate", 0.42),
                        ("middle", 0.63),
                        ("upper", 0.84),
                        ("unknown", None),
                    )
                },
                "low_or_moderate": {
                    "areas": 60,
                    "population": 200_000.0,
                    "rate": 0.315,
                    "served_share": 0.3,
                    "served_population_share": 0.32,
                },
            },
            "distance": {
                "unit": "m",
                "groups": {g: {"mean": 1234.4 + k, "median": 987.6} for k, g in enumerate(GROUPS)},
            },
        },
        "segregation": {
            "reference_group": REFERENCE,
            "dissimilarity": {
                "black_nh": 0.5123,
                "hispanic": 0.3345,
                "asian_nh": 0.2101,
                "minority": 0.4012,
            },
            "dissimilarity_vs_rest": {g: 0.31 for g in GROUPS},
            "isolation": {g: 0.22 for g in GROUPS},
            "exposure_to_reference": {g: 0.55 for g in GROUPS},
            "correlation_ratio": {g: 0.12 for g in GROUPS},
            "coverage_dissimilarity": {g: 0.35309 for g in GROUPS},
            "areal_coverage_dissimilarity": {g: 0.30567 for g in GROUPS},
            "coverage_gap_test": {
                "black_nh": {
                    "gap": 0.35309,
                    "p_value": 0.0002,
                    "p_value_one_sided": 0.001,
                    "null_mean": 0.0012,
                    "null_sd": 0.081,
                    "permutations": 999,
                },
                "hispanic": {
                    "gap": 0.1507,
                    "p_value": 0.0813,
                    "p_value_one_sided": 0.0402,
                    "null_mean": -0.0004,
                    "null_sd": 0.079,
                    "permutations": 999,
                },
            },
            "permutations": 999,
        },
        "clustering": {
            "weights": {
                "contiguity": "queen",
                "transform": "row-standardised",
                "areas": len(areas),
                "links": int(adjacency.nnz // 2),
                "islands": [],
                "island_policy": "exclude",
                "components": 1,
            },
            "moran": {
                "variable": "covered_fraction",
                "I": float(moran.I),
                "expected": float(moran.EI),
                "variance_rand": float(moran.VI_rand),
                "z_rand": float(moran.z_rand),
                "p_rand": float(moran.p_rand),
                "z_sim": 7.81,
                "p_sim": 0.01,
                "permutations": 99,
                "n": len(areas),
            },
            "moran_minority_share": {
                "variable": "minority_share",
                "I": 0.61,
                "expected": -0.0067,
                "z_sim": 9.1,
                "p_sim": 0.01,
                "permutations": 99,
                "n": 150,
            },
            "join_counts": {
                "served_served": 120,
                "unserved_unserved": 98,
                "served_unserved": 60,
                "joins": 278,
                "expected_served_served": 75.25,
                "expected_unserved_unserved": 70.2,
                "expected_served_unserved": 132.55,
                "variance_served_served": 80.1,
                "variance_unserved_unserved": 77.7,
                "variance_served_unserved": 40.04,
                "z_served_served": 5.0,
                "z_unserved_unserved": 3.154,
                "z_served_unserved": -11.466,
                "p_sim_served_served": 0.01,
                "p_sim_unserved_unserved": 0.01,
                "p_sim_served_unserved": None,
            },
            "bivariate_moran": {
                "x": "minority_share",
                "y": "covered_fraction",
                "I": -0.3312,
                "z_sim": -6.2,
                "p_sim": 0.01,
                "permutations": 99,
            },
            "local_moran": {
                "fdr": True,
                "alpha": 0.05,
                "counts": {
                    "high-high": 15,
                    "low-low": 12,
                    "high-low": 3,
                    "low-high": 4,
                    "not significant": 116,
                },
                "crosstab": {
                    "columns": ["majority_minority", "not_majority_minority"],
                    "rows": {
                        "high-high": {
                            "majority_minority": {"areas": 2, "population": 7_000.0},
                            "not_majority_minority": {"areas": 13, "population": 51_000.0},
                        },
                        "low-low": {
                            "majority_minority": {"areas": 9, "population": 40_321.4},
                            "not_majority_minority": {"areas": 3, "population": 10_000.0},
                        },
                    },
                    "areas_without_label": 2,
                    "population_without_label": 812.0,
                },
            },
        },
        "enclaves": enclaves,
        "holes": [
            {
                "id": "H1",
                "area_ids": [str(ids[0]), str(ids[1])],
                "area_fractions": [0.2, 0.1],
                "population": 812.4,
                "group_counts": {},
                "group_shares": {"minority": 0.61},
                "hole_area_m2": 1_250_000.0,
                "representative_point": [1.0, 2.0],
            }
        ],
        "enclave_settings": {
            "min_surround": 0.75,
            "min_population": 0.0,
            "contiguity": "queen",
            "transparent_area_ids": [],
            "mc_draws": 999,
            "contrast_group": "minority",
        },
        "exclusions": {
            "count": 3,
            "by_reason": {"empty geometry": 1, "duplicate id": 1, "no matching area": 1},
        },
        "cautions": ["12 areas have no population; their shares are undefined."],
    }
    digest = hashlib.sha256(b"fictional areas layer").hexdigest()
    manifest = {
        "tool": "coverage_audit",
        "version": "0.1.0",
        "spec": {
            "title": summary["title"],
            "areas": {"path": "areas.gpkg", "id": "geoid"},
            "population": {
                "total": "pop_total",
                "reference": REFERENCE,
                "groups": {g: f"pop_{g}" for g in GROUPS[:4]},
                "derive_minority": True,
                "majority_minority_share": 0.5,
                "majority_minority_rule": "at_or_above",
            },
            "footprint": [{"path": "sites.gpkg", "radius_m": RADIUS_M}],
            "analysis": {
                "served_threshold": 0.5,
                "contiguity": "queen",
                "permutations": 999,
                "seed": SEED,
                "enclave_min_surround": 0.75,
            },
        },
        "inputs": [
            {
                "role": "areas",
                "path": "areas.gpkg",
                "sha256": digest,
                "rows": n_areas,
                "crs": "LAEA (fictional)",
            },
            {
                "role": "footprint",
                "path": "sites.gpkg",
                "sha256": "ab" * 32,
                "rows": len(sites),
                "crs": "LAEA (fictional)",
            },
        ],
        "analysis_crs": synthetic.FICTIONAL_CRS,
        "seed": SEED,
        "libraries": {"numpy": np.__version__, "geopandas": gpd.__version__},
        "circle_vertices": 64,
        "started": "2026-05-17T09:00:00+00:00",
        "finished": "2026-05-17T09:00:07+00:00",
    }
    footprint = {
        "kind": "points",
        "name": "Fictional branch sites",
        "points": sites,
        "radius_m": RADIUS_M,
        "geometry": gpd.GeoSeries([reach], crs=areas.crs),
    }
    return {
        "summary": summary,
        "manifest": manifest,
        "areas": areas,
        "exclusions": exclusions,
        "id_column": "geoid",
        "groups": GROUPS,
        "reference": REFERENCE,
        "footprint": footprint,
        "moran_weights": graph.transform("r"),
    }


@pytest.fixture(scope="module")
def inputs() -> dict:
    return make_inputs()


@pytest.fixture(scope="module")
def report_html(inputs: dict) -> str:
    return render_report(**inputs)


def render(inputs: dict, **changes) -> str:
    options = {**inputs, **changes}
    return render_report(**options)


def element(html_text: str, tag: str, element_id: str) -> str:
    """The markup of the element with ``id``; tables here do not nest, so lazy is enough."""
    match = re.search(rf'<{tag}\b[^>]*\bid="{element_id}"[^>]*>.*?</{tag}>', html_text, re.S)
    assert match, f"no <{tag} id={element_id!r}>"
    return match.group(0)


def row_of(table_html: str, group: str) -> str:
    match = re.search(rf'<tr\b[^>]*data-group="{re.escape(group)}"[^>]*>.*?</tr>', table_html, re.S)
    assert match, f"no row for {group!r}"
    return match.group(0)


def cells(row_html: str) -> list[str]:
    return [
        html.unescape(re.sub(r"<[^>]+>", "", c))
        for c in re.findall(r"<t[hd]\b[^>]*>(.*?)</t[hd]>", row_html, re.S)
    ]


# --- self-containment and escaping ---------------------------------------------------------


def test_page_loads_nothing_from_outside(report_html: str) -> None:
    # No script at all, no stylesheet link, no remote reference in src/href/url().
    assert "<script" not in report_html.lower()
    assert "<link" not in report_html.lower()
    assert not re.search(r"""(?:src|href)\s*=\s*["']?\s*(?:https?:|//)""", report_html, re.I)
    assert not re.search(r"url\(\s*['\"]?(?:https?:|//)", report_html, re.I)
    assert "@import" not in report_html
    assert "Content-Security-Policy" in report_html and "default-src 'none'" in report_html
    # Every embedded image is a data URI; no file beside the page is needed to read it.
    for ref in re.findall(r"""(?:src|xlink:href|href)="([^"#][^"]*)\"""", report_html):
        assert ref.startswith("data:") or ref == "exclusions.csv", ref


def test_stylesheet_is_inlined_with_print_rules(report_html: str) -> None:
    style = re.search(r"<style>(.*?)</style>", report_html, re.S).group(1)
    assert "@media print" in style and "break-before: page" in style
    assert "@page" in style


def test_values_from_inputs_are_escaped(inputs: dict) -> None:
    changed = copy.deepcopy({k: v for k, v in inputs.items() if k not in ("areas",)})
    changed["summary"]["title"] = XSS
    changed["footprint"]["name"] = XSS_IMG
    changed["manifest"]["inputs"][0]["path"] = XSS
    changed["manifest"]["spec"]["areas"]["id"] = XSS
    changed["summary"]["cautions"].append(XSS_IMG)
    changed["summary"]["enclaves"][0]["id"] = XSS
    text = render(inputs, **changed)
    assert XSS not in text and XSS_IMG not in text
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    assert "&lt;img src=x onerror=&quot;window.__caXss=1&quot;&gt;" in text
    assert "<script" not in text.lower() and "<img" not in text.lower()


def test_group_names_are_escaped_in_tables_and_figures(inputs: dict) -> None:
    evil = "a<b>&$x$"
    summary = copy.deepcopy(inputs["summary"])
    summary["coverage"]["groups"][evil] = summary["coverage"]["groups"].pop("hispanic")
    text = render(inputs, summary=summary, groups=[REFERENCE, evil])
    assert "a<b>" not in text
    assert 'data-group="a&lt;b&gt;&amp;$x$"' in text
    # In the bar chart the name is drawn literally (no mathtext) and escaped in the SVG.
    assert charts.mpl_text(evil) == r"a<b>&\$x\$"
    assert "a&lt;b&gt;&amp;$x$" in element(text, "section", "coverage")


# --- sections present and absent ----------------------------------------------------------


def test_all_sections_present_with_full_data(report_html: str) -> None:
    for section in (
        "audited",
        "coverage",
        "segregation",
        "clustering",
        "enclaves",
        "methods",
        "cautions",
    ):
        assert f'<section id="{section}"' in report_html
    for table_id in (
        "coverage-table",
        "class-table",
        "distance-table",
        "segregation-table",
        "gap-table",
        "moran-table",
        "lisa-crosstab",
        "enclave-table",
        "hole-table",
        "exclusion-list",
        "join-table",
    ):
        assert f'id="{table_id}"' in report_html
    methods = element(report_html, "section", "methods")
    for source in (
        "Duncan and Duncan 1955",
        "Massey and Denton 1988",
        "Moran 1950",
        "Cliff and Ord 1981",
        "Anselin 1995",
        "Benjamini",
        "12 CFR 228.12(m)",
        "29 CFR 1607.4(D)",
        "random connected sets",
    ):
        assert source in methods, source
    assert f"seeded with {SEED}" in methods
    # Thresholds quoted from the resolved spec.
    assert "White alone) at or above 50.0%" in methods
    assert "shared with served areas reaches 75.0%" in methods
    assert "Moran scatterplot" in report_html


def test_sections_absent_when_their_data_are(inputs: dict) -> None:
    summary = {
        k: v
        for k, v in inputs["summary"].items()
        if k not in ("segregation", "clustering", "enclaves", "holes")
    }
    summary["coverage"] = {k: v for k, v in summary["coverage"].items() if k != "distance"}
    text = render(inputs, summary=summary, moran_weights=None)
    assert '<section id="coverage"' in text
    for section in ("segregation", "clustering", "enclaves"):
        assert f'<section id="{section}"' not in text
        assert f'href="#{section}"' not in text
    methods = element(text, "section", "methods")
    assert "Duncan" not in methods and "Anselin" not in methods and "Monte Carlo" not in methods
    assert 'id="distance-table"' not in text
    assert "Moran scatterplot" not in text and "Locator of enclave" not in text


def test_minimal_summary_still_renders(inputs: dict) -> None:
    # Only the two keys the report cannot do without; everything else absent or None.
    summary = {"schema_version": 1, "areas": {"input": None, "analysed": 3, "excluded": None}}
    text = render(
        inputs, summary=summary, manifest={}, exclusions=None, footprint=None, moran_weights=None
    )
    assert '<section id="audited"' in text and '<section id="cautions"' in text
    assert '<section id="coverage"' not in text and '<section id="methods"' not in text
    assert "n/a in the input" in text


def test_none_values_show_as_na(inputs: dict, report_html: str) -> None:
    row = cells(row_of(element(report_html, "table", "coverage-table"), "asian_nh"))
    assert row[0] == "asian_nh" and row[1] == "30,000"
    assert row[2:9] == ["n/a"] * 7
    summary = copy.deepcopy(inputs["summary"])
    summary["clustering"]["moran"] = {k: None for k in summary["clustering"]["moran"]}
    summary["enclaves"][0]["p_value"] = None
    summary["segregation"]["coverage_gap_test"]["black_nh"] = None
    text = render(inputs, summary=summary, moran_weights=None)
    assert "n/a" in element(text, "table", "moran-table")
    assert "n/a" in element(text, "table", "gap-table")


def test_ids_footprint_has_no_distance_and_no_points(inputs: dict) -> None:
    summary = copy.deepcopy(inputs["summary"])
    del summary["coverage"]["distance"]
    served = inputs["areas"].loc[inputs["areas"]["served"]].geometry
    footprint = {
        "kind": "ids",
        "name": "listed ids",
        "geometry": gpd.GeoSeries([shapely.union_all(served.to_numpy())], crs=inputs["areas"].crs),
    }
    text = render(inputs, summary=summary, footprint=footprint)
    assert "the areas listed as served in listed ids" in text
    assert 'id="distance-table"' not in text and "service point" not in text.split("Methods")[0]


# --- numbers as in the summary -----------------------------------------------------------


def test_coverage_table_numbers(report_html: str) -> None:
    table = element(report_html, "table", "coverage-table")
    assert len(re.findall(r"<tr\b[^>]*data-group=", table)) == len(GROUPS)
    # Hand-picked summary values and their expected rendering (1-decimal percentages,
    # 3-decimal ratios, signed percentage points with a typographic minus).
    black = cells(row_of(table, "black_nh"))
    assert black == [
        "black_nh",
        "90,210",
        "34,568",
        "41.2%",
        "40.0%",
        "0.574",
        "0.531",
        "\u221230.6 pp",
        "\u221235.3 pp",
        "yes: below 4/5",
    ]
    white = cells(row_of(table, "white_nh"))
    assert white[0] == "white_nh (reference)" and white[3] == "71.8%" and white[7] == "0.0 pp"
    # 0.80083 is not below four-fifths; the flag is the summary's, not recomputed.
    hispanic = cells(row_of(table, "hispanic"))
    assert hispanic[5] == "0.801" and hispanic[6] == "0.800" and hispanic[9] == "no"
    assert 'class="flagged"' in row_of(table, "black_nh")


def test_formatting_helpers() -> None:
    assert page.fmt_percent(0.41234) == "41.2%"
    assert page.fmt_percent(-0.0004) == "0.0%"
    assert page.fmt_points(0.0123) == "+1.2 pp"
    assert page.fmt_points(-0.0004) == "0.0 pp"
    assert page.fmt_fixed(-0.33125, 3) == "\u22120.331"
    assert page.fmt_p(0.0002) == "< 0.001" and page.fmt_p(0.001) == "0.001"
    assert page.fmt_p(float("nan")) == "n/a" and page.fmt_count(None) == "n/a"
    assert page.fmt_count(34_567.8) == "34,568"
    assert page.fmt_auto("p_sim_x", 0.0123) == "0.012"
    assert page.fmt_auto("islands", list("abcdefghijkl")).endswith("(12 in all)")


def test_other_sections_numbers(report_html: str) -> None:
    gap = element(report_html, "table", "gap-table")
    # Issue 12 item 5: one sign convention, group minus reference (the gap of +35.3 pp
    # and null mean of +0.1 pp are shown as differences).
    assert cells(row_of_text(gap, "black_nh")) == [
        "black_nh",
        "\u221235.3 pp",
        "< 0.001",
        "0.001",
        "\u22120.1 pp",
        "+8.1 pp",
        "999",
    ]
    seg = cells(row_of_text(element(report_html, "table", "segregation-table"), "black_nh"))
    assert seg[:2] == ["black_nh", "0.512"]
    lisa = element(report_html, "table", "lisa-crosstab")
    assert cells(row_of_text(lisa, "low-low")) == ["low-low", "12", "9", "40,321", "3", "10,000"]
    assert cells(row_of_text(lisa, "high-low")) == ["high-low", "3", "n/a", "n/a", "n/a", "n/a"]
    assert "2 areas (population 812) took no part in the local statistics" in report_html
    joins = element(report_html, "table", "join-table")
    assert cells(row_of_text(joins, "Unserved\u2013unserved")) == [
        "Unserved\u2013unserved",
        "98",
        "70.2",
        "77.7",
        "3.15",
        "0.010",
    ]
    assert cells(row_of_text(joins, "Served\u2013unserved"))[4:] == ["\u221211.47", "n/a"]
    classes = element(report_html, "table", "class-table")
    assert cells(row_of_text(classes, "Income tier: unknown"))[3] == "n/a"
    assert cells(row_of_text(classes, "Majority-minority areas"))[3] == "33.3%"
    dist = cells(row_of_text(element(report_html, "table", "distance-table"), "black_nh"))
    assert dist == ["black_nh", "1,235 m", "988 m"]


def row_of_text(table_html: str, first_cell: str) -> str:
    for row in re.findall(r"<tr\b.*?</tr>", table_html, re.S):
        if cells(row) and cells(row)[0] == first_cell:
            return row
    raise AssertionError(f"no row starting {first_cell!r}")


def test_lisa_crosstab_in_the_contract_shape(inputs: dict) -> None:
    # The flat {label: {side: ...}} form of the output contract reads the same as the
    # clustering stage's {"rows": ...} form.
    summary = copy.deepcopy(inputs["summary"])
    local = summary["clustering"]["local_moran"]
    local["crosstab"] = local["crosstab"]["rows"]
    lisa = element(render(inputs, summary=summary), "table", "lisa-crosstab")
    assert cells(row_of_text(lisa, "low-low")) == ["low-low", "12", "9", "40,321", "3", "10,000"]
    assert "rows" not in lisa


def test_generic_values_and_parameters() -> None:
    assert page.fmt_auto("joins", 1161.0) == "1,161"
    assert page.fmt_auto("I", 1.0) == "1.0000"
    assert page.fmt_auto("z_sim", -8.2099) == "\u22128.21"
    assert page.fmt_param(2000.0) == "2000" and page.fmt_param(0.05) == "0.05"
    assert page.fmt_param(None) == "not set" and page.fmt_param(["a", 1]) == "a, 1"


def test_four_fifths_note_and_cautions(report_html: str) -> None:
    assert "29 CFR 1607.4(D)" in report_html
    assert "screening rule of thumb" in report_html and "not as a legal test" in report_html
    top = element(report_html, "aside", "cautions-summary")
    assert report_html.index(top) < report_html.index('<section id="audited"')
    full = element(report_html, "section", "cautions")
    for phrase in (
        "not proof of discrimination",
        "modifiable areal unit problem",
        "margins of error",
        "business factors",
        "counsel",
        "12 areas have no population",
    ):
        assert phrase in top + full, phrase


def test_recorded_cautions_replace_standard_ones_on_the_same_topic(inputs: dict) -> None:
    summary = copy.deepcopy(inputs["summary"])
    summary["cautions"] = ["Survey margins of error are not carried into these figures."]
    full = element(render(inputs, summary=summary), "section", "cautions")
    assert "Survey margins of error are not carried" in full
    assert "Population figures are estimates with error." not in full
    assert "modifiable areal unit problem" in full


def test_exclusions_listed_or_linked(inputs: dict, report_html: str) -> None:
    listed = element(report_html, "table", "exclusion-list")
    assert len(re.findall(r"<tr>", listed)) == 1 + 3  # header row and three rows
    assert 'href="exclusions.csv"' not in report_html
    many = pd.DataFrame(
        {
            "source": "areas",
            "row": np.arange(120),
            "id": [f"X{i}" for i in range(120)],
            "reason": np.where(np.arange(120) < 100, "empty geometry", "duplicate id"),
        }
    )
    summary = {**inputs["summary"]}
    del summary["exclusions"]
    text = render(inputs, summary=summary, exclusions=many)
    listed = element(text, "table", "exclusion-list")
    assert len(re.findall(r"<tr>", listed)) == 1 + page.MAX_LISTED_EXCLUSIONS
    assert "X49" in listed and "X50" not in listed
    assert 'href="exclusions.csv"' in text and "the first 50 of 120" in text
    assert ">100</td>" in text and ">20</td>" in text  # counts by reason from the frame


def test_inputs_with_digests_and_parameters(report_html: str) -> None:
    audited = element(report_html, "section", "audited")
    assert hashlib.sha256(b"fictional areas layer").hexdigest() in audited
    assert "analysis.served_threshold" in audited and "population.groups.black_nh" in audited
    assert "footprint[0].radius_m" in audited
    assert synthetic.FICTIONAL_CRS in audited
    assert "each reaching 2,500 m" in audited and "64 vertices" in audited


# --- figures -----------------------------------------------------------------------------


def test_figures_are_inline_svg_with_unique_ids(report_html: str) -> None:
    svgs = re.findall(r"<svg\b", report_html)
    # overview, coverage bars, Moran scatter, two enclave locators
    assert len(svgs) == 5
    ids = re.findall(r'\bid="([^"]+)"', report_html)
    assert len(ids) == len(set(ids)), "duplicate element ids across inline SVGs"
    assert report_html.count('aria-label="Locator of enclave') == 2


def test_enclave_table_and_settings(inputs: dict, report_html: str) -> None:
    table = element(report_html, "table", "enclave-table")
    e1 = inputs["summary"]["enclaves"][0]
    row = cells(row_of_text(table, "E1"))
    assert row[:4] == ["E1", "1", f"{round(e1['population']):,}", "100.0%"]
    assert row[4] == f"{100 * e1['contrast_share']:.1f}%" and row[5] == "31.0%"
    assert row[6:] == ["0.004", "999", "moderate 1"]
    assert "Share minority" in table
    assert "Group whose share is tested" in report_html
    # An older summary naming the tested share after the minority reads the same.
    summary = copy.deepcopy(inputs["summary"])
    for e in summary["enclaves"]:
        e["minority_share"] = e.pop("contrast_share")
        e["mc_mean_minority_share"] = e.pop("mc_mean_contrast_share")
    older = cells(
        row_of_text(element(render(inputs, summary=summary), "table", "enclave-table"), "E1")
    )
    assert older == row


def test_top_level_weights_shown_with_enclaves_when_no_clustering(inputs: dict) -> None:
    summary = copy.deepcopy(inputs["summary"])
    summary["weights"] = summary.pop("clustering")["weights"]
    enclaves = element(render(inputs, summary=summary, moran_weights=None), "section", "enclaves")
    assert "Contiguity between areas" in enclaves and "Links (neighbour pairs)" in enclaves


def test_contrast_group_named_in_table_and_methods(inputs: dict) -> None:
    summary = copy.deepcopy(inputs["summary"])
    summary["enclave_settings"]["contrast_group"] = "black_nh"
    text = render(inputs, summary=summary)
    assert "Share black_nh" in element(text, "table", "enclave-table")
    assert "whose black_nh share is at least" in element(text, "section", "methods")


def test_locators_drawn_for_the_six_most_populous(inputs: dict) -> None:
    many = make_inputs(400, n_enclaves=8)
    text = render_report(**many)
    assert text.count('aria-label="Locator of enclave') == page.MAX_ENCLAVE_FIGURES
    assert "the 6 most populous of 8" in text
    # Populations were made decreasing with the label: E1..E6 are drawn, E7 and E8 not.
    assert 'aria-label="Locator of enclave E6"' in text
    assert 'aria-label="Locator of enclave E7"' not in text


def test_output_is_deterministic_apart_from_run_times(inputs: dict, tmp_path: Path) -> None:
    first, second = tmp_path / "a.html", tmp_path / "b.html"
    build_report(**inputs, path=first)
    manifest = {
        **inputs["manifest"],
        "started": "2030-01-01T00:00:00+00:00",
        "finished": "2030-01-01T00:00:09+00:00",
    }
    build_report(**{**inputs, "manifest": manifest}, path=second)
    a, b = first.read_text("utf-8"), second.read_text("utf-8")
    assert a != b
    for old, new in (
        ("2026-05-17T09:00:00+00:00", "2030-01-01T00:00:00+00:00"),
        ("2026-05-17T09:00:07+00:00", "2030-01-01T00:00:09+00:00"),
    ):
        a = a.replace(old, new)
    assert a == b
    build_report(**inputs, path=second)
    assert first.read_bytes() == second.read_bytes()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.html", "b.html"]


def test_moran_scatter_slope_is_published_columbus_i() -> None:
    # Columbus CRIME, queen and rook contiguity, row-standardised: I = 0.500188557 and
    # 0.5236702128 (Anselin 1988 data bundled with libpysal; values in REFERENCES.md, as
    # reproduced by esda's tests). The slope of W z on z is I (Anselin 1996).
    columbus = gpd.read_file(examples.get_path("columbus.shp"))
    areas = gpd.GeoDataFrame(
        {
            "id": columbus["POLYID"].astype(str),
            "covered_fraction": columbus["CRIME"],
            "served": True,
        },
        geometry=columbus.geometry,
    )
    for rook, published in ((False, 0.500188557), (True, 0.5236702128)):
        w = Graph.build_contiguity(columbus, rook=rook).transform("r")
        z, lag = page.moran_points(areas, moran_weights=w)
        assert z.size == 49
        np.testing.assert_allclose(np.dot(z, lag) / np.dot(z, z), published, rtol=1e-8)
        # The same points from a lag passed in directly, and from an m x m matrix + mask.
        z2, lag2 = page.moran_points(areas, moran_lag=w.sparse @ z)
        np.testing.assert_allclose(lag2, lag, rtol=RTOL)
        mask = np.ones(49, dtype=bool)
        z3, _ = page.moran_points(areas, moran_weights=w.sparse, moran_mask=mask)
        np.testing.assert_allclose(z3, z, rtol=RTOL)


def test_moran_scatter_leaves_out_areas_without_neighbours(inputs: dict) -> None:
    # Oracle: esda's Moran on the areas in the statistics (an island dropped).
    areas = inputs["areas"]
    keep = np.ones(len(areas), dtype=bool)
    keep[0] = False
    sub = Graph.build_contiguity(areas.loc[keep], rook=False).transform("r")
    full = sp.lil_matrix((len(areas), len(areas)))
    idx = np.flatnonzero(keep)
    full[np.ix_(idx, idx)] = sub.sparse.toarray()
    z, lag = page.moran_points(areas, moran_weights=full.tocsr())
    assert z.size == len(areas) - 1
    expected = esda.Moran(areas["covered_fraction"].to_numpy()[keep], sub, permutations=0).I
    np.testing.assert_allclose(np.dot(z, lag) / np.dot(z, z), expected, rtol=RTOL)


def test_constant_covered_fraction_gives_no_scatter(inputs: dict) -> None:
    areas = inputs["areas"].copy()
    areas["covered_fraction"] = 1.0
    assert page.moran_points(areas, moran_weights=inputs["moran_weights"]) is None
    assert "Moran scatterplot of covered" not in render(inputs, areas=areas)


def test_charts_leave_matplotlib_global_state_alone() -> None:
    # In a fresh interpreter: drawing never imports pyplot nor changes rcParams/backend.
    # rcParams are read with dict.__getitem__: going through RcParams would resolve the
    # "auto" backend, which itself imports pyplot.
    script = (
        "import sys, numpy as np, matplotlib\n"
        "rc = matplotlib.rcParams\n"
        "raw = lambda: {k: dict.__getitem__(rc, k) for k in list(dict.keys(rc))}\n"
        "before = raw()\n"
        "from coverage_audit.report import charts\n"
        "charts.coverage_bar_chart(['a', 'b'], [0.5, 0.2], comparison_rate=0.5,\n"
        "    comparison_label='a', flagged=[False, True])\n"
        "z = np.linspace(-1, 1, 9)\n"
        "charts.moran_scatter_chart(z, z / 2, moran_i=0.5, variable='v')\n"
        "print('pyplot' if 'matplotlib.pyplot' in sys.modules else 'no pyplot',\n"
        "      'same' if before == raw() else 'changed')\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, check=True, timeout=120
    )
    assert done.stdout.split() == ["no", "pyplot", "same"], done.stdout + done.stderr


def test_bar_chart_keeps_a_comparison_named_with_underscore() -> None:
    svg = charts.coverage_bar_chart(
        ["_hidden", "b"],
        [0.5, 0.2],
        comparison_rate=0.5,
        comparison_label="_hidden (reference)",
        flagged=[False, True],
    )
    assert "_hidden (reference)" in svg and "four-fifths" in svg


def test_empty_region_renders(inputs: dict) -> None:
    text = render(inputs, areas=inputs["areas"].iloc[:0], moran_weights=None)
    assert "<svg" in text  # the coverage bar chart still stands
    assert "Locator of enclave" not in text and "Overview of the region" not in text


def test_polygon_path_keeps_holes_empty() -> None:
    # Rendered with Agg and probed pixel by pixel; what should be filled is decided by
    # shapely's own point-in-polygon test.
    donut = shapely.Polygon(
        [(0, 0), (10, 0), (10, 10), (0, 10)], [[(3, 3), (3, 7), (7, 7), (7, 3)]]
    )
    shape = shapely.MultiPolygon([donut, shapely.box(15, 0, 20, 5)])
    path = charts.polygon_path([shape])
    assert (path.codes == MplPath.MOVETO).sum() == 3
    fig = Figure(figsize=(2.0, 1.0), dpi=100)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.add_patch(PathPatch(path, facecolor="black", edgecolor="none"))
    ax.set_xlim(0, 20)
    ax.set_ylim(0, 10)
    ax.set_axis_off()
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png")
    buffer.seek(0)
    image = imread(buffer)
    probes = np.array([[1.0, 1.0], [5.0, 5.0], [17.5, 2.5], [12.0, 2.0], [17.5, 8.0]])
    columns = (probes[:, 0] / 20 * image.shape[1]).astype(int)
    rows = ((1 - probes[:, 1] / 10) * image.shape[0]).astype(int)
    filled = image[rows, columns, :3].mean(axis=1) < 0.5
    expected = shapely.contains_xy(shape, probes[:, 0], probes[:, 1])
    assert filled.tolist() == expected.tolist() == [True, False, True, False, False]
    assert charts.polygon_path([shapely.Polygon()]) is None


# --- error paths -------------------------------------------------------------------------


def test_build_report_writes_atomically(inputs: dict, tmp_path: Path) -> None:
    target = tmp_path / "report.html"
    target.write_text("old", encoding="utf-8")
    build_report(**inputs, path=target)
    assert target.read_text("utf-8").startswith("<!DOCTYPE html>")
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]


@pytest.mark.parametrize(
    ("change", "match"),
    [
        ({"summary": {"schema_version": 2}}, r"schema_version is 2 .* renders schema_version 1"),
        ({"summary": [1, 2]}, r"summary must be the summary.json mapping, not list"),
        ({"manifest": "x"}, r"manifest must be the manifest.json mapping, not str"),
        ({"areas": pd.DataFrame({"geoid": ["1"]})}, r"areas must be a GeoDataFrame"),
        ({"id_column": "tract"}, r"areas has no column 'tract'; it needs the id column"),
        ({"groups": []}, r"groups is empty"),
        ({"reference": "white"}, r"reference group 'white' is not among groups"),
        (
            {"exclusions": pd.DataFrame({"row": [1]})},
            r"exclusions has no column 'source', 'id', 'reason'",
        ),
        ({"exclusions": [("areas", 1, "x", "bad")]}, r"exclusions must be a DataFrame, not list"),
        ({"moran_mask": [True, False]}, r"moran_mask has 2 entries but areas has 154 rows"),
        ({"moran_weights": np.eye(154)}, r"moran_weights must be a scipy sparse matrix"),
        (
            {"moran_weights": sp.eye(10, format="csr")},
            r"moran_weights is 10 x 10 but areas has 154 rows",
        ),
        (
            {"moran_weights": sp.csr_matrix(np.ones((154, 154)))},
            r"moran_weights is not row-standardised",
        ),
        ({"moran_lag": np.zeros(7)}, r"moran_lag has 7 values but areas has 154 rows"),
        (
            {"moran_lag": np.zeros(153), "moran_mask": np.ones(154, dtype=bool)},
            r"moran_lag has 153 values",
        ),
        (
            {"moran_lag": np.r_[np.nan, np.zeros(153)], "moran_mask": np.ones(154, dtype=bool)},
            r"moran_lag is missing for areas marked as in the statistics",
        ),
    ],
)
def test_input_errors(inputs: dict, change: dict, match: str) -> None:
    with pytest.raises(InputError, match=match):
        render(inputs, **change)


def test_missing_area_columns_are_named(inputs: dict) -> None:
    areas = inputs["areas"].drop(columns=["covered_fraction", "served"])
    with pytest.raises(InputError, match=r"no column 'served', 'covered_fraction'"):
        render(inputs, areas=areas)


def test_missing_covered_fraction_in_statistics(inputs: dict) -> None:
    areas = inputs["areas"].copy()
    areas.loc[5, "covered_fraction"] = np.nan
    with pytest.raises(InputError, match=r"covered_fraction is missing for areas in the spatial"):
        render(inputs, areas=areas)


def test_bad_target_paths(inputs: dict, tmp_path: Path) -> None:
    with pytest.raises(InputError, match=r"is a folder; pass the path of report.html"):
        build_report(**inputs, path=tmp_path)
    with pytest.raises(CoverageAuditError, match=r"output folder .*nowhere does not exist"):
        build_report(**inputs, path=tmp_path / "nowhere" / "report.html")


# --- in a browser ------------------------------------------------------------------------


@pytest.mark.browser
def test_report_in_headless_chromium(inputs: dict, tmp_path: Path, browser_page) -> None:
    target = tmp_path / "report.html"
    build_report(**inputs, path=target)
    browser_page.open(target, ready="document.readyState === 'complete'")
    assert browser_page.console_errors() == []
    assert browser_page.network_requests() == []
    rows = browser_page.js("return document.querySelectorAll('#coverage-table tbody tr').length;")
    assert rows == len(GROUPS)
    # The scripted name and id show as text and ran nothing.
    text = browser_page.js("return document.body.innerText;")
    assert XSS in text
    assert browser_page.js("return window.__caXss === undefined;")
    svgs = browser_page.js(
        "return Array.from(document.querySelectorAll('figure svg'))"
        ".map(s => s.getBoundingClientRect().width);"
    )
    assert len(svgs) == 5 and min(svgs) > 100
    importlib.import_module(HARNESS).assert_not_blank(browser_page.screenshot("top.png"))
    browser_page.js("document.getElementById('coverage').scrollIntoView();")
    importlib.import_module(HARNESS).assert_not_blank(browser_page.screenshot("coverage.png"))


@pytest.mark.browser
def test_report_prints_one_section_per_page(inputs: dict, tmp_path: Path, browser_page) -> None:
    target = tmp_path / "report.html"
    build_report(**inputs, path=target)
    browser_page.open(target, ready="document.readyState === 'complete'")
    pdf = base64.b64decode(
        browser_page.driver.execute_cdp_cmd("Page.printToPDF", {"printBackground": True})["data"]
    )
    pages = len(re.findall(rb"/Type\s*/Page[^s]", pdf))
    # Seven sections, each starting a new page, after the title page.
    assert pages >= 8
    assert browser_page.console_errors() == []
