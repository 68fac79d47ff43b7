"""Further analyses through the whole audit: comparison, change, peers, controls, sweeps."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from coverage_audit import run_audit
from coverage_audit.errors import InputError, SpecError

from .conftest import GRID_CRS, grid, spec_text, write_spec

SEED = 20261201


def _region(tmp_path, *, footprints: str, extra: str = ""):
    areas = grid(8, 8)
    rng = np.random.default_rng(SEED)
    n = len(areas)
    areas["total"] = rng.integers(200, 400, n)
    # The left half is mostly black, the right half mostly white.
    left = areas["col"] < 4
    areas["black"] = np.where(
        left, (areas["total"] * 0.8).astype(int), (areas["total"] * 0.1).astype(int)
    )
    areas["white"] = areas["total"] - areas["black"]
    areas["income_ratio"] = np.where(left, rng.uniform(40, 90, n), rng.uniform(80, 160, n)).round(1)
    areas.to_file(tmp_path / "areas.gpkg", driver="GPKG")
    # Before: everything; after: the left three columns lost service.
    gpd.GeoDataFrame(geometry=[shapely.box(0, 0, 8000, 8000)], crs=GRID_CRS).to_file(
        tmp_path / "before.gpkg"
    )
    gpd.GeoDataFrame(geometry=[shapely.box(3000, 0, 8000, 8000)], crs=GRID_CRS).to_file(
        tmp_path / "after.gpkg"
    )
    sites = gpd.GeoDataFrame(
        geometry=[shapely.Point(6000, 4000), shapely.Point(1000, 1000)], crs=GRID_CRS
    )
    sites.to_file(tmp_path / "sites.gpkg")
    text = spec_text("", population_extra='income_ratio = "income_ratio"')
    text = text.replace("[footprint]\n\n", footprints + "\n")
    return areas, write_spec(tmp_path / "audit.toml", text + extra)


TWO = """
[[footprint]]
name = "after"
path = "after.gpkg"

[[footprint]]
name = "before"
path = "before.gpkg"
"""


def test_comparison_and_change_recover_planted_losses(tmp_path):
    areas, spec = _region(
        tmp_path, footprints=TWO, extra='\n[change]\nbefore = "before"\nafter = "after"\n'
    )
    result = run_audit(spec)
    s = result.summary
    names = [f["name"] for f in s["comparison"]["footprints"]]
    assert sorted(names) == ["after", "before"]
    assert s["comparison"]["footprints"][0]["name"] == "before"  # no gap ranks first
    lost = sorted(s["change"]["lost_service"]["ids"])
    expected = sorted(areas.loc[areas["col"] < 3, "geoid"])  # planted: columns 0-2
    assert lost == expected
    assert s["change"]["gained_service"]["count"] == 0
    assert "covered_fraction_before" in result.areas.columns


def test_points_sensitivity_sweeps_are_monotonic(tmp_path):
    fp = '[footprint]\nname = "sites"\npath = "sites.gpkg"\nradius = 1500'
    _, spec = _region(tmp_path, footprints=fp)
    s = run_audit(spec).summary["sensitivity"]
    shares = [row["served_area_share"] for row in s["thresholds"]]
    # A higher served threshold can never serve more areas (served = fraction >= t).
    assert all(a >= b for a, b in zip(shares, shares[1:], strict=False))
    assert [row["threshold"] for row in s["thresholds"]][0] == pytest.approx(0.25)
    assert [row["threshold"] for row in s["thresholds"]][-1] == pytest.approx(0.75)
    radius_shares = [row["served_area_share"] for row in s["radius"]]
    # A longer reach can never serve fewer areas.
    assert all(a <= b for a, b in zip(radius_shares, radius_shares[1:], strict=False))
    assert [row["factor"] for row in s["radius"]][0] == 0.5 and s["radius"][-1]["factor"] == 2.0


def test_peer_comparison_flags_a_lender_below_peers(tmp_path):
    areas, spec = _region(
        tmp_path,
        footprints='[footprint]\npath = "after.gpkg"',
        extra='\n[activity]\npath = "apps.csv"\nid = "geoid"\nlender_columns = ["bank_a", "bank_b", "bank_c"]\n',
    )
    mm = (areas["black"] / areas["total"] > 0.5).to_numpy()
    table = pd.DataFrame(
        {
            "geoid": areas["geoid"],
            "bank_a": np.where(mm, 2, 20),  # few applications from majority-minority tracts
            "bank_b": np.where(mm, 20, 20),
            "bank_c": np.where(mm, 18, 22),
        }
    )
    table.to_csv(tmp_path / "apps.csv", index=False)
    peers = run_audit(spec).summary["peers"]
    by_name = {row["lender"]: row for row in peers["lenders"]}
    assert by_name["bank_a"]["below_peers"] is True
    assert by_name["bank_b"]["below_peers"] is False
    # Share of bank_a's activity in majority-minority tracts, by hand: 2*k / (2*k + 20*(64-k)).
    k = int(mm.sum())
    assert by_name["bank_a"]["share"] == pytest.approx(2 * k / (2 * k + 20 * (64 - k)))


def test_exclusion_models_with_controls(tmp_path):
    _, spec = _region(
        tmp_path,
        footprints='[footprint]\npath = "after.gpkg"',
        extra='\n[explain]\ncontrols = ["income_ratio", "population_density"]\n',
    )
    with pytest.warns(UserWarning, match="per predictor"):  # 24 unserved areas, 3 predictors
        explain = run_audit(spec).summary["explain"]
    models = explain["models"]
    # Column 3 is majority-black but served, so the groups are not perfectly separated and
    # the models are estimated: unserved odds rise with minority share (planted).
    change = {row["kind"]: row for row in models["minority_change"]}
    assert change["logit"]["odds_ratio_alone"] > 1
    assert set(models["controls"]) == {"income_ratio", "population_density"}
    assert "rules" in explain and "rules" in explain["rules"]


def test_perfect_separation_is_reported_not_fatal(tmp_path):
    _, spec = _region(tmp_path, footprints='[footprint]\npath = "half.gpkg"', extra="\n[explain]\n")
    # Served exactly where the residents are mostly white: minority share separates the
    # outcome completely, so no logistic model has a finite estimate.
    gpd.GeoDataFrame(geometry=[shapely.box(4000, 0, 8000, 8000)], crs=GRID_CRS).to_file(
        tmp_path / "half.gpkg"
    )
    with pytest.warns(UserWarning, match="perfectly separated"):
        models = run_audit(spec).summary["explain"]["models"]
    assert "perfectly separated" in models["skipped"]


def test_explain_names_missing_controls(tmp_path):
    _, spec = _region(
        tmp_path,
        footprints='[footprint]\npath = "after.gpkg"',
        extra='\n[explain]\ncontrols = ["median_rent"]\n',
    )
    with pytest.raises(InputError, match="'median_rent', which the areas do not have"):
        run_audit(spec)


def test_change_must_name_known_footprints(tmp_path):
    _, spec = _region(
        tmp_path, footprints=TWO, extra='\n[change]\nbefore = "before"\nafter = "later"\n'
    )
    with pytest.raises(SpecError, match='names footprint "later" but the footprints are'):
        run_audit(spec)


def test_activity_needs_one_table_shape(tmp_path):
    _, spec = _region(
        tmp_path,
        footprints='[footprint]\npath = "after.gpkg"',
        extra='\n[activity]\npath = "a.csv"\nid = "geoid"\n',
    )
    with pytest.raises(SpecError, match="either lender_column and count_column"):
        run_audit(spec)
