"""Shared fixtures: tiny hand-built regions written to real files in a temporary folder."""

from __future__ import annotations

import hashlib
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

#: A metric equal-area CRS for hand-built grids; used as the analysis CRS too, so that no
#: reprojection touches the hand-computed areas.
GRID_CRS = "+proj=laea +lat_0=-32 +lon_0=-135 +x_0=0 +y_0=0 +datum=WGS84 +units=m +no_defs"
SEED = 12345


def grid(nx: int, ny: int, size: float = 1000.0, prefix: str = "01001") -> gpd.GeoDataFrame:
    """Unit cells (``size`` metres) in rows of ``nx``; ids are 11-digit GEOID-like strings
    starting with a zero (state 01) so that leading zeros are exercised."""
    cells, ids, rows, cols = [], [], [], []
    for j in range(ny):
        for i in range(nx):
            cells.append(shapely.box(i * size, j * size, (i + 1) * size, (j + 1) * size))
            ids.append(f"{prefix}{len(ids) + 1:06d}")
            rows.append(j)
            cols.append(i)
    return gpd.GeoDataFrame({"geoid": ids, "row": rows, "col": cols}, geometry=cells, crs=GRID_CRS)


def digest(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def write_spec(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


BASE_SPEC = """
title = "test audit"
[areas]
path = "areas.gpkg"
id = "geoid"
{areas_extra}
[population]
total = "total"
reference = "white"
derive_minority = true
{population_extra}
[population.groups]
white = "white"
black = "black"
[footprint]
{footprint}
[analysis]
analysis_crs = "{crs}"
permutations = 99
enclave_draws = 99
{analysis_extra}
"""


def spec_text(
    footprint: str, areas_extra: str = "", population_extra: str = "", analysis_extra: str = ""
) -> str:
    return BASE_SPEC.format(
        footprint=footprint,
        areas_extra=areas_extra,
        population_extra=population_extra,
        analysis_extra=analysis_extra,
        crs=GRID_CRS,
    )


def write_two_by_two(folder: Path, **columns: list) -> Path:
    """Write the 2 x 2 grid (areas.gpkg, with any extra ``columns``) and zone.gpkg."""
    areas = grid(2, 2)
    areas["total"] = [100, 200, 300, 400]
    areas["white"] = [80, 50, 30, 100]
    areas["black"] = [10, 150, 250, 300]
    for name, values in columns.items():
        areas[name] = values
    areas.to_file(folder / "areas.gpkg", layer="areas", driver="GPKG")
    footprint = gpd.GeoDataFrame(
        {"zone": ["a", "b"]},
        geometry=[shapely.box(0, 0, 500, 1000), shapely.box(0, 1000, 1000, 2000)],
        crs=GRID_CRS,
    )
    footprint.to_file(folder / "zone.gpkg", driver="GPKG")
    return folder


@pytest.fixture
def two_by_two(tmp_path: Path) -> Path:
    """A 2 x 2 grid with hand-picked counts and a footprint covering the left half of
    cell 1 and all of cell 3 (cells numbered row by row from the lower left).

    Cells: 1 (0,0)  2 (1,0)  3 (0,1)  4 (1,1), each 1 km x 1 km.
    """
    write_two_by_two(tmp_path)
    write_spec(tmp_path / "audit.toml", spec_text('path = "zone.gpkg"'))
    return tmp_path


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(SEED)


def frame_of(values: dict) -> pd.DataFrame:
    return pd.DataFrame(values)


#: The bundled demo region (fictional, generated from its fixed seed).
DEMO_REGION = Path(__file__).resolve().parent.parent / "demo_regions" / "ostmere"


@pytest.fixture(scope="session")
def demo_audit():
    """Run a demo scenario's audit once per test session (per xdist worker); return it.

    A function of the scenario name giving the real :class:`~coverage_audit.audit.AuditResult`
    (its ``findings`` are the typed tree the report and map are drawn from). The audits
    run with 99 permutations and enclave draws, which keeps them to a second or two each.
    """
    import warnings

    from coverage_audit import load_spec, run_audit

    done: dict = {}

    def run(name: str):
        if name not in done:
            spec = load_spec(DEMO_REGION / f"{name}.toml").with_analysis(
                permutations=99, enclave_draws=99
            )
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # the demo's expected warnings
                done[name] = run_audit(spec)
        return done[name]

    return run
