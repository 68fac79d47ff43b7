"""The fictional demo region: Ostmere, a made-up county on an empty stretch of ocean.

:func:`write_demo_region` generates, from a fixed seed, a region of a few hundred census-
tract-like areas with spatially patterned demographics and incomes, and three service
footprints of the kinds the tool reads:

- ``branches.geojson``: a bank's branch network as points (reach 2 km), sited mostly in
  higher-income, mostly-white neighbourhoods;
- ``delivery_zone.geojson``: a same-day delivery zone polygon that covers the central city
  but goes around one neighbourhood;
- ``assessment_area.csv``: a bank's assessment area as a list of whole tracts, which
  leaves out a cluster of low- and moderate-income tracts on its edge.

Nothing here depicts a real place, person or company: the coordinates lie in the open
South Pacific, ids use the unassigned state code 99, and names are invented.
"""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .demo_downloads import write_download_files
from .synthetic import FICTIONAL_CRS, demographics, nested_blocks, tessellation

DEMO_SEED = 20_261_201
DEMO_NAME = "ostmere"
_REGION_AREAS = 420
_CELL_M = 1_400.0

SPEC_TEMPLATE = """# Ostmere demo audit: {title}. A fictional region; see README.md beside this file.
title = "{title}"

[areas]
path = "areas.gpkg"
layer = "tracts"
id = "geoid"
table = "demographics.csv"

[population]
total = "pop_total"
reference = "white_nh"
derive_minority = true
income_ratio = "income_ratio"

[population.groups]
white_nh = {{ column = "pop_white_nh", label = "non-Hispanic White" }}
black_nh = {{ column = "pop_black_nh", label = "non-Hispanic Black" }}
hispanic = {{ column = "pop_hispanic", label = "Hispanic" }}
asian_nh = {{ column = "pop_asian_nh", label = "non-Hispanic Asian" }}

{footprint}

[analysis]
served_threshold = 0.5
contiguity = "queen"
permutations = 999
enclave_draws = 999
transparent_zero_population = true
seed = {seed}
{analysis_extra}"""

SCENARIOS = {
    "delivery": (
        "Same-day delivery zone, Ostmere",
        '[footprint]\nname = "same_day_zone"\npath = "delivery_zone.geojson"',
    ),
    "branches": (
        "Branch network reach, Ostmere Savings",
        """[[footprint]]
name = "branches_2026"
path = "branches.geojson"
radius = 2
radius_unit = "km"

[[footprint]]
name = "branches_2024"
path = "branches_2024.geojson"
radius = 2
radius_unit = "km"

[change]
before = "branches_2024"
after = "branches_2026"

[activity]
path = "applications.csv"
id = "geoid"
lender_column = "lender"
count_column = "applications"

[explain]
controls = ["income_ratio", "population_density", "distance_to_downtown_km"]
hub = [-135.0, -32.0]
hub_name = "downtown"
""",
    ),
    "lending": (
        "Mortgage lending review, Ostmere Savings",
        """[footprint]
name = "branches_2026"
path = "branches.geojson"
radius = 2
radius_unit = "km"

[lending]
path = "hmda_records.txt"
lender = "9999OSTMERESAVINGS01"
lender_name = "Ostmere Savings"
years = [2022, 2023, 2024]
markets = ["90010"]
peers = "market"
band = [0.5, 2.0]
alpha = 0.05

[lending.lender_names]
9999HARBORMUTUAL0001 = "Harbor Mutual"
9999TIDEWATERCREDI01 = "Tidewater Credit Union"
9999COPPERLINEBANK01 = "Copperline Bank"
9999SALTMARSHFEDER01 = "Saltmarsh Federal"
9999LANTERNFISHLEN01 = "Lanternfish Lending"
""",
    ),
    "assessment_area": (
        "Assessment area, Ostmere Savings",
        '[footprint]\nname = "assessment_area"\nserved_ids = "assessment_area.csv"\n'
        'served_ids_column = "geoid"',
    ),
}
#: The scenario that starts from Census-layout downloads (demo_downloads.py).
SCENARIOS["zip_delivery"] = ("Grocery delivery by ZIP code, from Census downloads, Ostmere", "")
DOWNLOADS_SPEC = """# Ostmere demo audit: {title}. A fictional region; see README.md beside this file.
# Every input is in a Census Bureau layout, read as downloaded: a TIGER/Line tract zip,
# a data.census.gov table zip, Census API JSON and the ZCTA-to-tract relationship file.
title = "{title}"

[areas]
path = "tl_2099_99_tract.zip"

[[table]]
path = "ACSDT5Y2099.B03002.zip"

[[table]]
path = "b19113_api.json"

[population]
preset = "acs_b03002"
groups = ["black_nh", "asian_nh", "hispanic"]
unit = "people"

[footprint]
name = "delivery_zips"
zips = "delivery_zips.csv"
zcta_relationship = "tab20_zcta520_tract20_natl.txt"

[analysis]
served_threshold = 0.5
permutations = 999
enclave_draws = 999
transparent_zero_population = true
seed = {seed}
"""
#: The delivery scenario compares the zone within the city it is drawn around.
DELIVERY_EXTRA = """contrast_group = "black_nh"

[study_area]
name = "Ostmere city limits"
path = "city_limits.geojson"
"""
SCENARIOS["clinics"] = (
    "Primary care clinics, Ostmere Health Cooperative",
    """[footprint]
name = "clinics"
path = "clinics.geojson"
radius = 5
radius_unit = "km"

[access]
capacity = "doctors"
catchment = "5 km"
decay = [[2, 1.0], [3.5, 0.68], [5, 0.22]]
site_id = "site_id"
low_access_fraction = 0.5""",
)
#: Fictional lenders of the activity table; the first is the audited bank.
LENDERS = (
    "Ostmere Savings",
    "Harbor Mutual",
    "Tidewater Credit Union",
    "Copperline Bank",
    "Saltmarsh Federal",
    "Lanternfish Lending",
)


def build_region(seed: int = DEMO_SEED) -> tuple[gpd.GeoDataFrame, pd.DataFrame]:
    """Return the tract polygons (projected, metres) and their demographics."""
    cells = tessellation(_REGION_AREAS, seed=seed, cell_size_m=_CELL_M, jitter=0.38)
    width = cells.total_bounds[2]
    height = cells.total_bounds[3]
    cells = cells.set_geometry(
        shapely.transform(cells.geometry.values, lambda c: c - [width / 2, height / 2])
    )
    cells["x"] = cells["x"] - width / 2
    cells["y"] = cells["y"] - height / 2
    cells["geoid"] = [f"99017{k:06d}" for k in range(100, 100 + 100 * len(cells), 100)]
    demo = demographics(cells, seed=seed + 1)
    # A lake and a park: zero-population areas (transparent to enclave detection).
    r = np.hypot(cells["x"], cells["y"])
    lake = int(np.argmin(np.hypot(cells["x"] + 0.30 * width, cells["y"] - 0.25 * height)))
    park = int(np.argmin(np.hypot(cells["x"] - 0.05 * width, cells["y"] + 0.08 * height)))
    for k in (lake, park):
        demo.loc[
            demo.index[k], [c for c in demo.columns if c.startswith("pop_") or c == "households"]
        ] = 0
        demo.loc[demo.index[k], "income_ratio"] = np.nan
    names = np.array(
        [f"Tract {k / 100:.2f}" for k in range(100, 100 + 100 * len(cells), 100)], dtype=object
    )
    names[lake] = "Ostmere Lake"
    names[park] = "Heron Commons Park"
    cells["name"] = names
    cells["_r"] = r
    cells["_skipped"] = _skipped_neighbourhood(cells, demo)
    return cells, demo


def _skipped_neighbourhood(cells: gpd.GeoDataFrame, demo: pd.DataFrame) -> np.ndarray:
    """Return the neighbourhood the delivery zone goes around.

    It lies near the central tract with the highest Black share, far enough inside the
    zone (radius 0.4 of the span) to be enclosed.
    """
    x, y = cells["x"].to_numpy(), cells["y"].to_numpy()
    span = float(np.ptp(x))
    total = demo["pop_total"].to_numpy(float)
    black = np.where(total > 0, demo["pop_black_nh"].to_numpy(float) / np.maximum(total, 1), 0.0)
    inner = np.hypot(x, y) < 0.15 * span
    pivot = int(np.argmax(np.where(inner, black, -1)))
    return np.asarray(np.hypot(x - x[pivot], y - y[pivot]) < 2.6 * _CELL_M)


#: Group shares of the skipped neighbourhood: predominantly Black, while the streets
#: around it are mixed, so the contrast shows at once.
_NEIGHBOURHOOD_SHARES = {
    "pop_black_nh": 0.76,
    "pop_white_nh": 0.12,
    "pop_hispanic": 0.07,
    "pop_asian_nh": 0.03,
    "pop_other_nh": 0.02,
}


def _concentrate(demo: pd.DataFrame, skipped: np.ndarray) -> None:
    """Give the skipped neighbourhood its group shares (totals kept)."""
    rows = demo.index[skipped]
    total = demo.loc[rows, "pop_total"].to_numpy(float)
    assigned = np.zeros_like(total)
    columns = list(_NEIGHBOURHOOD_SHARES)
    for column in columns[1:]:
        counts = np.floor(total * _NEIGHBOURHOOD_SHARES[column])
        demo.loc[rows, column] = counts.astype(demo[column].dtype)
        assigned += counts
    demo.loc[rows, columns[0]] = (total - assigned).astype(demo[columns[0]].dtype)


def _city_limits(cells: gpd.GeoDataFrame) -> shapely.Geometry:
    """Return the fictional city limits: the tracts within 0.45 of the span of the centre."""
    x, y = cells["x"].to_numpy(), cells["y"].to_numpy()
    city = np.hypot(x, y) < 0.45 * float(np.ptp(x))
    limits = shapely.union_all(cells.geometry.values[city])
    limits = shapely.buffer(shapely.buffer(limits, 200.0), -200.0)
    return shapely.simplify(limits, 60.0)


def _minority_share(demo: pd.DataFrame) -> np.ndarray:
    total = demo["pop_total"].to_numpy(float)
    return np.where(total > 0, 1 - demo["pop_white_nh"].to_numpy(float) / np.maximum(total, 1), 0.0)


def _delivery_zone(cells: gpd.GeoDataFrame, demo: pd.DataFrame) -> shapely.Polygon:
    x, y = cells["x"].to_numpy(), cells["y"].to_numpy()
    span = float(np.ptp(x))
    central = np.hypot(x, y) < 0.4 * span
    skipped = cells["_skipped"].to_numpy(dtype=bool)
    zone = shapely.union_all(cells.geometry.values[central])
    zone = shapely.buffer(shapely.buffer(zone, 400.0), -400.0)
    hole = shapely.union_all(cells.geometry.values[skipped])
    zone = shapely.difference(zone, shapely.buffer(hole, 120.0, join_style="mitre"))
    # A delivery zone is drawn by hand: keep it simple.
    return shapely.simplify(zone, 60.0)


def _branch_sites(
    cells: gpd.GeoDataFrame, demo: pd.DataFrame, rng: np.random.Generator
) -> gpd.GeoDataFrame:
    share = _minority_share(demo)
    income = demo["income_ratio"].fillna(0).to_numpy(float)
    weight = (income / 100.0) ** 3 * (1.0 - share) ** 2
    weight[demo["pop_total"].to_numpy() == 0] = 0
    chosen = rng.choice(len(cells), size=16, replace=False, p=weight / weight.sum())
    points = shapely.point_on_surface(cells.geometry.values[chosen])
    names = [f"Ostmere Savings branch {k:02d}" for k in range(1, len(chosen) + 1)]
    return gpd.GeoDataFrame(
        {"site_id": [f"B{k:02d}" for k in range(1, len(chosen) + 1)], "name": names},
        geometry=points,
        crs=cells.crs,
    )


def _closed_branches(
    cells: gpd.GeoDataFrame, demo: pd.DataFrame, rng: np.random.Generator
) -> gpd.GeoDataFrame:
    """Five branches that were open in 2024 and have since closed, in minority tracts."""
    share = _minority_share(demo)
    weight = share**4
    weight[demo["pop_total"].to_numpy() == 0] = 0
    chosen = rng.choice(len(cells), size=5, replace=False, p=weight / weight.sum())
    points = shapely.point_on_surface(cells.geometry.values[chosen])
    return gpd.GeoDataFrame(
        {
            "site_id": [f"C{k:02d}" for k in range(1, 6)],
            "name": [f"Ostmere Savings branch {k:02d}" for k in range(17, 22)],
            "closed": ["2025"] * 5,
        },
        geometry=points,
        crs=cells.crs,
    )


def _applications(
    cells: gpd.GeoDataFrame, demo: pd.DataFrame, rng: np.random.Generator
) -> pd.DataFrame:
    """Mortgage applications per tract and lender (a long table).

    Every lender's volume follows households; the audited bank (the first lender) draws
    less than half as much from majority-minority tracts as its peers do.
    """
    share = _minority_share(demo)
    households = demo["households"].to_numpy(float)
    rows = []
    for k, lender in enumerate(LENDERS):
        scale = rng.uniform(0.004, 0.012)
        tilt = np.where(share > 0.5, 0.45, 1.0) if k == 0 else rng.uniform(0.9, 1.1, share.size)
        counts = rng.poisson(households * scale * tilt)
        rows.append(
            pd.DataFrame(
                {"geoid": cells["geoid"].to_numpy(), "lender": lender, "applications": counts}
            )
        )
    table = pd.concat(rows, ignore_index=True)
    return table[table["applications"] > 0].reset_index(drop=True)


def _assessment_area(cells: gpd.GeoDataFrame, demo: pd.DataFrame) -> list[str]:
    x, y = cells["x"].to_numpy(), cells["y"].to_numpy()
    span = float(np.ptp(x))
    inside = (x < 0.22 * span) & (y > -0.3 * span)
    # Leave out a run of low- and moderate-income tracts along the eastern edge.
    lmi = demo["income_ratio"].to_numpy(float) < 80
    edge = inside & (x > 0.08 * span) & lmi
    return list(cells.loc[inside & ~edge, "geoid"])


def write_demo_region(folder: str | Path, seed: int = DEMO_SEED) -> Path:
    """Generate the Ostmere demo region and its audit specs into ``folder``.

    Returns the folder. Files: areas.gpkg (layer ``tracts``, EPSG:4326),
    demographics.csv, branches.geojson, delivery_zone.geojson, city_limits.geojson,
    assessment_area.csv,
    one ``<scenario>.toml`` spec per scenario, and README.md.
    """
    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed + 2)
    cells, demo = build_region(seed)
    geo = cells[["geoid", "name", "geometry"]].to_crs("EPSG:4326")
    geo = geo.set_geometry(shapely.set_precision(geo.geometry.values, 1e-7))
    path = out / "areas.gpkg"
    if path.exists():
        path.unlink()
    geo.to_file(path, layer="tracts", driver="GPKG")
    # Sites and applications are drawn from the demographics as generated; the skipped
    # neighbourhood is then given its shares (the sites stay where they were drawn).
    branches = _branch_sites(cells, demo, rng)
    closed = _closed_branches(cells, demo, rng)
    applications = _applications(cells, demo, rng)
    _concentrate(demo, cells["_skipped"].to_numpy(dtype=bool))
    table = pd.concat([cells[["geoid"]], demo], axis=1)
    table.to_csv(out / "demographics.csv", index=False, lineterminator="\n")
    zone = gpd.GeoDataFrame(
        {"zone": ["same-day"]}, geometry=[_delivery_zone(cells, demo)], crs=FICTIONAL_CRS
    )
    _write_geojson(zone.to_crs("EPSG:4326"), out / "delivery_zone.geojson")
    city = gpd.GeoDataFrame(
        {"name": ["Ostmere city limits"]}, geometry=[_city_limits(cells)], crs=FICTIONAL_CRS
    )
    _write_geojson(city.to_crs("EPSG:4326"), out / "city_limits.geojson")
    _write_geojson(branches.to_crs("EPSG:4326"), out / "branches.geojson")
    before = pd.concat([branches, closed], ignore_index=True)
    _write_geojson(
        gpd.GeoDataFrame(before, crs=cells.crs).to_crs("EPSG:4326"), out / "branches_2024.geojson"
    )
    applications.to_csv(out / "applications.csv", index=False, lineterminator="\n")
    pd.DataFrame({"geoid": _assessment_area(cells, demo)}).to_csv(
        out / "assessment_area.csv", index=False, lineterminator="\n"
    )
    write_download_files(out, cells, demo, seed)
    write_lending_records(out / "hmda_records.txt", cells, demo, seed)
    for key, (title, footprint) in SCENARIOS.items():
        if key == "zip_delivery":
            (out / f"{key}.toml").write_text(
                DOWNLOADS_SPEC.format(title=title, seed=seed), encoding="utf-8"
            )
            continue
        (out / f"{key}.toml").write_text(
            SPEC_TEMPLATE.format(
                title=title,
                footprint=footprint,
                seed=seed,
                analysis_extra=DELIVERY_EXTRA if key == "delivery" else "",
            ),
            encoding="utf-8",
        )
    write_margin_scenario(out, cells, demo, seed)
    _write_geojson(_clinic_sites(cells, demo, seed).to_crs("EPSG:4326"), out / "clinics.geojson")
    write_block_scenario(out, cells, demo, seed)
    (out / "README.md").write_text(_readme(len(cells)), encoding="utf-8")
    return out


#: Yearly applications and tilt in majority-minority tracts of each fictional lender of
#: the record file: Ostmere Savings draws less than half as much from those tracts.
_RECORD_LENDERS = (
    ("Ostmere Savings", 260, 0.45, 20),
    ("Harbor Mutual", 215, 1.05, 0),
    ("Tidewater Credit Union", 130, 1.0, 0),
    ("Copperline Bank", 170, 0.95, 30),
    ("Saltmarsh Federal", 90, 1.1, 0),
    ("Lanternfish Lending", 60, 1.0, 0),
)


def write_lending_records(
    path: Path, cells: gpd.GeoDataFrame, demo: pd.DataFrame, seed: int
) -> Path:
    """Write the fictional HMDA-layout record file of the demo region (pipe-delimited).

    Six made-up lenders (LEI-like codes starting 9999), 2022-2024, one fictional MSA/MD
    (90010); a few records per lender and year have an ``NA`` tract, as published files
    do. Drawn from its own seeded stream, so the other demo files do not change.
    """
    from .synthetic_lending import FictionalLender, fictional_lei, lending_records

    total = demo["pop_total"].to_numpy(dtype=float)
    tracts = pd.DataFrame(
        {
            "geoid": cells["geoid"].to_numpy(),
            "minority_pct": np.round(100.0 * _minority_share(demo), 2),
            "income_pct": demo["income_ratio"].fillna(0.0).to_numpy(dtype=float),
            "population": total,
            "households": demo["households"].to_numpy(dtype=float),
        }
    )
    lenders = [
        FictionalLender(
            lei=fictional_lei(name.replace(" ", ""), 1),
            name=name,
            applications_per_year=volume,
            minority_tilt=tilt,
            purchased_per_year=bought,
        )
        for name, volume, tilt, bought in _RECORD_LENDERS
    ]
    rng = np.random.default_rng([seed, 15])
    records = lending_records(tracts, lenders, (2022, 2023, 2024), rng, na_tracts=2)
    records.to_csv(path, sep="|", index=False, lineterminator="\n")
    return path


def _clinic_sites(cells: gpd.GeoDataFrame, demo: pd.DataFrame, seed: int) -> gpd.GeoDataFrame:
    """Fourteen clinics of a fictional health cooperative, with their doctors.

    Larger practices sit in higher-income, mostly-white tracts; the few clinics in
    minority neighbourhoods are small, so access (doctors within reach per resident,
    2SFCA) is lower there even where a clinic is close. Own random stream, so the other
    demo files do not change.
    """
    rng = np.random.default_rng(seed + 17)
    share = _minority_share(demo)
    income = demo["income_ratio"].fillna(0).to_numpy(float)
    populated = demo["pop_total"].to_numpy() > 0
    weight = np.where(populated, (income / 100.0) ** 2 * (1.0 - share) ** 2, 0.0)
    large = rng.choice(len(cells), size=10, replace=False, p=weight / weight.sum())
    small_weight = np.where(populated, share**3, 0.0)
    small_weight[large] = 0.0
    small = rng.choice(len(cells), size=4, replace=False, p=small_weight / small_weight.sum())
    chosen = np.r_[large, small]
    doctors = np.r_[rng.integers(40, 121, size=10), rng.integers(3, 9, size=4)]
    return gpd.GeoDataFrame(
        {
            "site_id": [f"K{k:02d}" for k in range(1, 15)],
            "name": [f"Ostmere Health Cooperative clinic {k:02d}" for k in range(1, 15)],
            "doctors": doctors.astype(int),
        },
        geometry=shapely.point_on_surface(cells.geometry.values[chosen]),
        crs=cells.crs,
    )


#: The scenario whose demographics carry margins of error (a table of its own, so the
#: other scenarios' files stay as they are).
MARGIN_SCENARIO = "outreach"
#: Count columns of the demo and their margin columns.
_MARGIN_COLUMNS = {
    "pop_total": "moe_total",
    "pop_white_nh": "moe_white_nh",
    "pop_black_nh": "moe_black_nh",
    "pop_hispanic": "moe_hispanic",
    "pop_asian_nh": "moe_asian_nh",
}


def demo_margins(demo: pd.DataFrame, seed: int = DEMO_SEED) -> pd.DataFrame:
    """Fictional 90% margins of error for the demo counts, plausible in size.

    A count x of a tract with total t gets SE = sqrt(deff x (1 - x/t) (1/s - 1)) with a
    sampling rate s of 8% (five years of a survey) and a design effect of 1.5, times a
    little noise; the total gets the same without the (1 - x/t) factor. Small groups so
    get large relative margins (about 45% for 200 people of 4,000), large ones small (about
    10%). A zero estimate gets a margin of 12. MOE = 1.645 SE, rounded.
    """
    rng = np.random.default_rng(seed + 3)
    total = demo["pop_total"].to_numpy(float)
    out = pd.DataFrame(index=demo.index)
    for column, moe in _MARGIN_COLUMNS.items():
        x = demo[column].to_numpy(float)
        keep = 1.0 if column == "pop_total" else np.clip(1 - x / np.maximum(total, 1), 0, 1)
        se = np.sqrt(1.5 * x * keep * (1 / 0.08 - 1)) * rng.lognormal(0.0, 0.15, x.size)
        out[moe] = np.where(x > 0, np.round(1.645 * se), 12).astype(np.int64)
    return out


def _outreach_area(cells: gpd.GeoDataFrame, demo: pd.DataFrame, margins: pd.DataFrame) -> list[str]:
    """Return the tracts a home-repair outreach program visited: 30 neighbouring tracts.

    Chosen, deterministically, as the first neighbourhood (the 30 tracts nearest a tract,
    tracts taken in id order) where the Asian residents' coverage ratio to the white
    residents' is under 0.8 but its 90% interval reaches past 0.8, so the scenario shows a
    four-fifths flag the survey error cannot confirm.
    """
    from .stats.uncertainty import Z90, four_fifths_confidence, interval90

    x, y = cells["x"].to_numpy(), cells["y"].to_numpy()
    g, r = demo["pop_asian_nh"].to_numpy(float), demo["pop_white_nh"].to_numpy(float)
    se_g = margins["moe_asian_nh"].to_numpy(float) / Z90
    se_r = margins["moe_white_nh"].to_numpy(float) / Z90
    for k in range(len(cells)):
        near = np.argsort(np.hypot(x - x[k], y - y[k]), kind="stable")[:30]
        f = np.zeros(len(cells))
        f[near] = 1.0
        pg, pr = f @ g / g.sum(), f @ r / r.sum()
        ratio = pg / pr
        if not 0.7 < ratio < 0.78:
            continue
        # Delta method for R = p_g / p_r with independent groups (stats.uncertainty).
        grad_g, grad_r = (f - pg) / g.sum() / pr, -(f - pr) / r.sum() * pg / pr**2
        se = float(np.sqrt(np.sum(grad_g**2 * se_g**2) + np.sum(grad_r**2 * se_r**2)))
        if four_fifths_confidence(interval90(ratio, se)) == "uncertain":
            return sorted(cells["geoid"].to_numpy()[near].tolist())
    raise AssertionError("no neighbourhood fits the outreach scenario")  # pragma: no cover


def write_margin_scenario(
    folder: Path, cells: gpd.GeoDataFrame, demo: pd.DataFrame, seed: int
) -> None:
    """Write the counts with margins, the outreach area and its spec into ``folder``."""
    margins = demo_margins(demo, seed)
    table = pd.concat([cells[["geoid"]], demo, margins], axis=1)
    table.to_csv(folder / "demographics_margins.csv", index=False, lineterminator="\n")
    pd.DataFrame({"geoid": _outreach_area(cells, demo, margins)}).to_csv(
        folder / "outreach_area.csv", index=False, lineterminator="\n"
    )
    (folder / f"{MARGIN_SCENARIO}.toml").write_text(_margin_spec(seed), encoding="utf-8")


def _margin_spec(seed: int) -> str:
    """Return the outreach spec: the scenarios' template with the margin table and columns."""
    text = SPEC_TEMPLATE.format(
        title="Home-repair outreach, Ostmere",
        footprint='[footprint]\nname = "outreach_2026"\nserved_ids = "outreach_area.csv"\n'
        'served_ids_column = "geoid"',
        seed=seed,
        analysis_extra="",
    )
    text = text.replace('table = "demographics.csv"', 'table = "demographics_margins.csv"')
    text = text.replace(
        'total = "pop_total"', f'total = "pop_total"\ntotal_moe = "{_MARGIN_COLUMNS["pop_total"]}"'
    )
    for column, moe in _MARGIN_COLUMNS.items():
        if column != "pop_total":
            text = text.replace(f'column = "{column}"', f'column = "{column}", moe = "{moe}"')
    return text.replace(
        "see README.md beside this file.\n",
        "see README.md beside this file.\n# The counts carry margins of error (90%), as "
        "American Community Survey tables do.\n",
        1,
    )


#: The scenario whose people are counted by census block: the delivery zone again.
BLOCK_SCENARIO = "delivery_blocks"
#: Demo count columns and the 2020 redistricting table P2 codes their blocks carry
#: (coverage_audit.io.blocks.PRESETS["pl_p2"]); "other" goes to some other race alone.
_P2_COLUMNS = {
    "pop_hispanic": "P2_002N",
    "pop_white_nh": "P2_005N",
    "pop_black_nh": "P2_006N",
    "pop_asian_nh": "P2_008N",
    "pop_other_nh": "P2_010N",
}


def demo_blocks(cells: gpd.GeoDataFrame, demo: pd.DataFrame, seed: int) -> gpd.GeoDataFrame:
    """Return fictional census blocks nested in the tracts, 8 a tract, with P2 counts.

    People live more densely towards the city centre, so tracts on the delivery zone's
    edge hold more of their people on the inner side. Block sums equal the tract counts.
    """
    counts = demo[list(_P2_COLUMNS)].rename(columns=_P2_COLUMNS)
    blocks = nested_blocks(cells, counts, seed=seed + 3, per_tract=8, decay_m=3 * _CELL_M)
    blocks.insert(2, "P2_001N", blocks[list(_P2_COLUMNS.values())].sum(axis=1))
    blocks = blocks.drop(columns="tract").to_crs("EPSG:4326")
    return blocks.set_geometry(shapely.set_precision(blocks.geometry.values, 1e-7))


def write_block_scenario(
    folder: Path, cells: gpd.GeoDataFrame, demo: pd.DataFrame, seed: int
) -> None:
    """Write blocks.parquet (GeoParquet) and the delivery spec that counts people by block."""
    demo_blocks(cells, demo, seed).to_parquet(folder / "blocks.parquet", index=False)
    title, footprint = SCENARIOS["delivery"]
    text = SPEC_TEMPLATE.format(
        title=f"{title}, people counted by census block",
        footprint=footprint,
        seed=seed,
        analysis_extra='contrast_group = "black_nh"\n',
    )
    text += (
        "\n# People counted where they live: fictional census blocks with the 2020 "
        "redistricting\n# table P2's codes; the tract counts are the blocks' sums.\n"
        '[blocks]\npath = "blocks.parquet"\npreset = "pl_p2"\n'
    )
    (folder / f"{BLOCK_SCENARIO}.toml").write_text(text, encoding="utf-8")


def _write_geojson(frame: gpd.GeoDataFrame, path: Path) -> None:
    data = json.loads(frame.to_json(drop_id=True))
    for feature in data["features"]:
        feature["geometry"] = _round_coords(feature["geometry"])
    data["crs"] = {"type": "name", "properties": {"name": "urn:ogc:def:crs:OGC:1.3:CRS84"}}
    path.write_text(json.dumps(data, separators=(",", ":")) + "\n", encoding="utf-8")


def _round_coords(geometry: dict) -> dict:
    def walk(c):
        if isinstance(c, (list, tuple)) and c and isinstance(c[0], (int, float)):
            return [round(float(v), 7) for v in c]
        return [walk(v) for v in c]

    return {"type": geometry["type"], "coordinates": walk(geometry["coordinates"])}


def _readme(n: int) -> str:
    return f"""# Ostmere: a fictional demo region

Ostmere is an invented county of {n} census-tract-like areas, generated by
`coverage_audit.demo.write_demo_region` with seed {DEMO_SEED} (regenerate with
`python -m coverage_audit.demo demo_regions/ostmere`). Its coordinates lie on an empty
stretch of the South Pacific; ids use the unassigned state code 99; every name is made
up. Population counts follow smooth spatial patterns (a few concentrations of each
group), and tract income ratios (tract median family income as a percent of the area
median) fall where the share of minority residents is high, as in many real regions.
Two areas have no residents: Ostmere Lake and Heron Commons Park.

## Scenarios
- `delivery.toml`: a same-day delivery zone (`delivery_zone.geojson`) drawn around the
  central city, compared within the city limits (`city_limits.geojson`, the spec's
  `[study_area]`). The zone goes around one neighbourhood, a pocket surrounded by served
  streets, where most residents are Black while the streets around it are mixed. Is it
  the sort of gap a reporter should ask about?
- `branches.toml`: the branch network of a fictional bank, Ostmere Savings
  (`branches.geojson`, 16 branches, reach 2 km). Branches sit mostly in higher-income,
  mostly-white tracts. The spec also compares the 2024 network (`branches_2024.geojson`,
  with five branches in minority neighbourhoods since closed), checks the bank's mortgage
  applications by tract against five fictional peer lenders (`applications.csv`), and
  asks whether income, density and distance downtown explain the gap.
- `assessment_area.toml`: the bank's assessment area as a list of whole tracts
  (`assessment_area.csv`). It leaves out a run of low- and moderate-income tracts on its
  eastern edge.

- `outreach.toml`: the tracts a city home-repair outreach program visited
  (`outreach_area.csv`), audited with the survey's margins of error
  (`demographics_margins.csv`: the same counts with a `moe_` column for each). The Asian
  residents' coverage ratio falls under 0.8, but its 90% interval reaches past 0.8: the
  four-fifths flag is "uncertain", a gap the survey error cannot confirm.
- `zip_delivery.toml`: a grocer's delivery area given as ZIP codes (`delivery_zips.csv`),
  starting from files in Census Bureau layouts, as a user downloads them: tracts as a
  TIGER/Line zip (`tl_2099_99_tract.zip`, NAD83; the lake is water only), table B03002 as
  a data.census.gov zip (`ACSDT5Y2099.B03002.zip`, read with the `acs_b03002` preset,
  margins kept beside estimates), median family income as Census API JSON
  (`b19113_api.json`) and the ZCTA-to-tract relationship file
  (`tab20_zcta520_tract20_natl.txt`, fictional ZCTAs). One listed ZIP is a PO-box ZIP
  with no ZCTA: it is listed in exclusions.csv. All values are made up.
- `lending.toml`: a mortgage lending review of Ostmere Savings from loan records in the
  HMDA public layout (`hmda_records.txt`, pipe-delimited, three years, six fictional
  lenders). The bank's share of applications from majority-minority tracts is set
  against its peers' in the same market; it is the one lender below its peers.
- `clinics.toml`: the primary care clinics of a fictional health cooperative
  (`clinics.geojson`, each with its number of doctors), audited by reach (5 km) and by
  access to capacity (an enhanced two-step floating catchment with a stepped distance
  decay), so a clinic's crowding counts as well as its distance.
- `delivery_blocks.toml`: the delivery zone again, with people counted where they live:
  fictional census blocks (`blocks.parquet`, columns in the 2020 redistricting table P2
  layout, read with the `pl_p2` preset). A tract half inside the zone may have most of
  its residents in either half; the report gives the block-based rates beside the areal
  ones and says how far they differ.

Run them all with `coverage-audit demo`; outputs go to `outputs/demo/<scenario>/`.
"""


if __name__ == "__main__":  # pragma: no cover
    import sys

    target = sys.argv[1] if len(sys.argv) > 1 else "demo_regions/ostmere"
    print(write_demo_region(target))
