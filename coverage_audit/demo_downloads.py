"""Ostmere's inputs as a user downloads them: Census layouts, fictional values.

:func:`write_download_files` writes, beside the tidy demo files, the same fictional region
in the published layouts the readers of :mod:`coverage_audit.io` accept (REFERENCES.md,
"Public data layouts"):

- ``tl_2099_99_tract.zip``: a TIGER/Line-style zipped shapefile (NAD83, ``GEOID``, ``ALAND``,
  ``AWATER`` ...); Ostmere Lake is water only (``ALAND = 0``);
- ``ACSDT5Y2099.B03002.zip``: a data.census.gov download of table B03002 (codes row,
  labels row, quoted values, trailing commas, ``1400000US`` GEO_IDs), with its metadata
  file beside the data file as downloads have it;
- ``b19113_api.json``: Census API JSON of median family income (B19113), with the API's
  "not available" sentinel for the lake and the park, and a top-coded value;
- ``tab20_zcta520_tract20_natl.txt``: a ZCTA-to-tract relationship file over fictional
  ZCTAs (5 km squares numbered from ``00101``), pipe-delimited;
- ``delivery_zips.csv``: the ZIP codes a fictional grocer delivers to, one of them a
  PO-box ZIP with no ZCTA.

Every date and name inside the archives is fixed, so regeneration is byte-identical.
"""

from __future__ import annotations

import csv
import io
import json
import tempfile
import zipfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely

#: Fixed time stamp of every archive member (zip entries carry one).
_ZIP_TIME = (2099, 12, 1, 0, 0, 0)
_ZCTA_M = 5_000.0
_NH = "Estimate!!Total:!!Not Hispanic or Latino:"
_HL = "Estimate!!Total:!!Hispanic or Latino:"
_RACES = (
    "White alone",
    "Black or African American alone",
    "American Indian and Alaska Native alone",
    "Asian alone",
    "Native Hawaiian and Other Pacific Islander alone",
    "Some other race alone",
    "Two or more races:",
    "Two or more races:!!Two races including Some other race",
    "Two or more races:!!Two races excluding Some other race, and three or more races",
)
#: B03002 labels by line (ACS table shell: Hispanic or Latino origin by race).
B03002_LABELS = (
    ["Estimate!!Total:", _NH]
    + [f"{_NH}!!{r}" for r in _RACES]
    + [_HL]
    + [f"{_HL}!!{r}" for r in _RACES]
)


def _zip(path: Path, members: list[tuple[str, bytes]]) -> None:
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_DEFLATED) as archive:
        for name, data in members:
            info = zipfile.ZipInfo(name, date_time=_ZIP_TIME)
            info.compress_type = zipfile.ZIP_DEFLATED
            info.external_attr = 0o644 << 16
            archive.writestr(info, data)


def _b03002(demo: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
    """All 21 lines of B03002 from the demo's groups; the rest split at random."""
    other = demo["pop_other_nh"].to_numpy(np.int64)
    split = np.array([rng.multinomial(n, [0.15, 0.05, 0.3, 0.5]) for n in other])
    two = split[:, 3]
    two_incl = rng.binomial(two, 0.3)
    hisp = demo["pop_hispanic"].to_numpy(np.int64)
    hsplit = np.array([rng.multinomial(n, [0.3, 0.03, 0.02, 0.01, 0.01, 0.4, 0.23]) for n in hisp])
    h_two_incl = rng.binomial(hsplit[:, 6], 0.6)
    nh = [
        demo["pop_white_nh"].to_numpy(np.int64),
        demo["pop_black_nh"].to_numpy(np.int64),
        split[:, 0],
        demo["pop_asian_nh"].to_numpy(np.int64),
        split[:, 1],
        split[:, 2],
        two,
        two_incl,
        two - two_incl,
    ]
    hl = [hsplit[:, k] for k in range(7)] + [h_two_incl, hsplit[:, 6] - h_two_incl]
    lines = [demo["pop_total"].to_numpy(np.int64), sum(nh[:7])] + nh + [hisp] + hl
    assert np.array_equal(lines[0], lines[1] + hisp), "B03002 lines must add up"
    out = {}
    for k, values in enumerate(lines, start=1):
        out[f"B03002_{k:03d}E"] = values
        margin = np.round(
            1.645 * np.sqrt(np.maximum(values, 4)) * rng.uniform(1.4, 2.6, values.size)
        )
        out[f"B03002_{k:03d}M"] = margin.astype(np.int64)
    return pd.DataFrame(out)


def _download_csv(geoids: list[str], names: list[str], table: pd.DataFrame) -> bytes:
    codes = ["GEO_ID", "NAME"] + list(table.columns)
    labels = ["Geography", "Geographic Area Name"]
    for column in table.columns:
        line = int(column[7:10]) - 1
        text = B03002_LABELS[line]
        labels.append(
            text if column.endswith("E") else text.replace("Estimate", "Margin of Error", 1)
        )
    buffer = io.StringIO()
    writer = csv.writer(buffer, quoting=csv.QUOTE_ALL, lineterminator=",\n")
    writer.writerow(codes)
    writer.writerow(labels)
    for k, geoid in enumerate(geoids):
        writer.writerow(["1400000US" + geoid, names[k]] + [str(v) for v in table.iloc[k]])
    return buffer.getvalue().encode("utf-8")


def _tiger_zip(cells: gpd.GeoDataFrame, water: np.ndarray, path: Path) -> None:
    area = np.round(cells.geometry.area.to_numpy()).astype(np.int64)
    geo = cells.to_crs("EPSG:4269")
    points = shapely.point_on_surface(geo.geometry.values)
    geoid = cells["geoid"].tolist()
    frame = gpd.GeoDataFrame(
        {
            "STATEFP": [g[:2] for g in geoid],
            "COUNTYFP": [g[2:5] for g in geoid],
            "TRACTCE": [g[5:] for g in geoid],
            "GEOID": geoid,
            "NAME": [str(int(g[5:]) / 100).rstrip("0").rstrip(".") for g in geoid],
            "NAMELSAD": [f"Census Tract {int(g[5:]) / 100:g}" for g in geoid],
            "MTFCC": "G5020",
            "FUNCSTAT": "S",
            "ALAND": np.where(water, 0, area),
            "AWATER": np.where(water, area, 0),
            "INTPTLAT": [f"{p.y:+.7f}" for p in points],
            "INTPTLON": [f"{p.x:+.7f}" for p in points],
        },
        geometry=shapely.set_precision(geo.geometry.values, 1e-7),
        crs="EPSG:4269",
    )
    with tempfile.TemporaryDirectory() as tmp:
        shp = Path(tmp) / f"{path.stem}.shp"
        pyogrio.write_dataframe(
            frame,
            shp,
            driver="ESRI Shapefile",
            layer_options={"DBF_DATE_LAST_UPDATE": "2099-12-01"},
        )
        members = [
            (p.name, p.read_bytes()) for p in sorted(Path(tmp).iterdir()) if p.suffix != ".xml"
        ]
    _zip(path, members)


def _relationship(cells: gpd.GeoDataFrame, water: np.ndarray) -> tuple[str, pd.DataFrame]:
    """ZCTA-to-tract relationship rows over 5 km squares; returns text and ZCTA shares."""
    x0, y0, x1, y1 = cells.total_bounds
    nx = int(np.ceil((x1 - x0) / _ZCTA_M))
    ny = int(np.ceil((y1 - y0) / _ZCTA_M))
    header = (
        "OID_ZCTA5_20|GEOID_ZCTA5_20|NAMELSAD_ZCTA5_20|AREALAND_ZCTA5_20|AREAWATER_ZCTA5_20|"
        "MTFCC_ZCTA5_20|CLASSFP_ZCTA5_20|FUNCSTAT_ZCTA5_20|OID_TRACT_20|GEOID_TRACT_20|"
        "NAMELSAD_TRACT_20|AREALAND_TRACT_20|AREAWATER_TRACT_20|MTFCC_TRACT_20|CLASSFP_TRACT_20|"
        "FUNCSTAT_TRACT_20|AREALAND_PART|AREAWATER_PART"
    )
    squares: list[shapely.Polygon] = []
    codes: list[str] = []
    for j in range(ny):
        for i in range(nx):
            squares.append(
                shapely.box(
                    x0 + i * _ZCTA_M,
                    y0 + j * _ZCTA_M,
                    x0 + (i + 1) * _ZCTA_M,
                    y0 + (j + 1) * _ZCTA_M,
                )
            )
            codes.append(f"{100 + len(codes) + 1:05d}")
    geoms = cells.geometry.values
    tree = shapely.STRtree(np.array(squares, dtype=object))
    area = np.round(shapely.area(geoms)).astype(np.int64)
    parts = []
    for t, z in zip(*tree.query(geoms, predicate="intersects"), strict=True):
        piece = float(shapely.area(shapely.intersection(geoms[t], squares[z])))
        if piece >= 1.0:
            parts.append((t, z, int(round(piece))))
    parts.sort(key=lambda p: (codes[p[1]], p[0]))
    zland: dict[int, int] = {}
    zwater: dict[int, int] = {}
    for t, z, a in parts:
        (zwater if water[t] else zland)[z] = (zwater if water[t] else zland).get(z, 0) + a
    lines = [header]
    for t, z, a in parts:
        g = cells["geoid"].iloc[t]
        land, wat = (0, int(area[t])) if water[t] else (int(area[t]), 0)
        lines.append(
            "|".join(
                str(v)
                for v in (
                    z + 1,
                    codes[z],
                    f"ZCTA5 {codes[z]}",
                    zland.get(z, 0),
                    zwater.get(z, 0),
                    "G6350",
                    "B5",
                    "S",
                    t + 1,
                    g,
                    f"Census Tract {int(g[5:]) / 100:g}",
                    land,
                    wat,
                    "G5020",
                    "S1",
                    "S",
                    0 if water[t] else a,
                    a if water[t] else 0,
                )
            )
        )
    shares = pd.DataFrame(
        [(codes[z], t, a) for t, z, a in parts], columns=["zcta", "tract", "part"]
    )
    return "\n".join(lines) + "\n", shares


def write_download_files(out: Path, cells: gpd.GeoDataFrame, demo: pd.DataFrame, seed: int) -> None:
    """Write Ostmere's inputs in Census layouts (see the module docstring) into ``out``."""
    rng = np.random.default_rng(seed + 3)
    names = cells["name"].tolist()
    water = np.array([n == "Ostmere Lake" for n in names])
    geoids = cells["geoid"].tolist()
    _tiger_zip(cells[["geoid", "geometry"]], water, out / "tl_2099_99_tract.zip")
    table = _b03002(demo, rng)
    area_names = [f"{n}; Ostmere County; Fictional State" for n in names]
    metadata = "Column Name,Label\nGEO_ID,Geography\nNAME,Geographic Area Name\n" + "".join(
        f"{c},{B03002_LABELS[int(c[7:10]) - 1] if c.endswith('E') else 'Margin of Error'}\n"
        for c in table.columns
    )
    _zip(
        out / "ACSDT5Y2099.B03002.zip",
        [
            ("ACSDT5Y2099.B03002-Column-Metadata.csv", metadata.encode("utf-8")),
            ("ACSDT5Y2099.B03002-Data.csv", _download_csv(geoids, area_names, table)),
        ],
    )
    income = np.round(demo["income_ratio"].to_numpy(float) * 780).astype("float")
    values = [str(int(v)) if np.isfinite(v) else "-666666666" for v in income]
    top = int(np.nanargmax(income))
    values[top] = "250001"
    api = [["NAME", "B19113_001E", "state", "county", "tract"]] + [
        [area_names[k], values[k], g[:2], g[2:5], g[5:]] for k, g in enumerate(geoids)
    ]
    (out / "b19113_api.json").write_text(
        "[" + ",\n".join(json.dumps(r) for r in api) + "]\n", encoding="utf-8"
    )
    text, parts = _relationship(cells, water)
    (out / "tab20_zcta520_tract20_natl.txt").write_text(text, encoding="utf-8")
    # The grocer's ZIP list: ZCTAs whose residents are mostly white, and one PO-box ZIP.
    pop = demo["pop_total"].to_numpy(float)
    white = demo["pop_white_nh"].to_numpy(float)
    parts["pop"] = pop[parts["tract"]]
    parts["white"] = white[parts["tract"]]
    by_zcta = parts.groupby("zcta")[["pop", "white"]].sum()
    share = by_zcta["white"] / by_zcta["pop"].where(by_zcta["pop"] > 0)
    listed = sorted(share[share > 0.45].index)
    rows = [f"{z},Ostmere route {k + 1}" for k, z in enumerate(listed)]
    rows.append("00099,Ostmere post office boxes")
    (out / "delivery_zips.csv").write_text("zip,route\n" + "\n".join(rows) + "\n", encoding="utf-8")
