"""Benchmark of reading Census-layout inputs against plain pandas/pyogrio reads, same run.

Writes, into a temporary folder, a fictional nationwide-size input set in the published
layouts: a data.census.gov download of table B03002 with 85,000 rows (codes row, labels
row, quoted values, trailing commas, ``1400000US`` GEO_IDs, 21 estimates and 21 margins)
and a cartographic-boundary-style tract zip (``cb_2099_us_tract_500k.zip``, shapefile in
NAD83) of the synthetic 85,000-area tessellation. Then times:

- table, ours: ``read_census_table`` (layout detected by content, labels row kept aside,
  phantom column dropped, prefix removed, margins paired), then the counts parsed with
  annotations recognised, as ``load_areas`` does;
- table, baseline: ``pandas.read_csv(skiprows=[1])`` with type inference (what a user would
  write by hand, without annotations handled or ids fixed);
- boundaries, ours: ``read_layer`` on the zip, GEOID detected, water-only areas found;
- boundaries, baseline: ``pyogrio.read_dataframe`` on the zip.
- end to end: ``load_areas`` with both files (validation, repair checks, join, projection).

Prints each time (best of ``--repeat``) and the tracemalloc peak of Python allocations,
with the ratio ours/baseline, and the process peak RSS at the end.
Usage: python benchmarks/bench_inputs.py [--areas 85000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import csv
import resource
import tempfile
import time
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import shapely
from _timing import measure

from coverage_audit.inputs import _numeric_problem, load_areas, read_layer
from coverage_audit.io.boundaries import detect_id_column, water_only
from coverage_audit.io.census import parse_margins, read_census_table
from coverage_audit.spec import spec_from_dict
from coverage_audit.synthetic import tessellation


def write_inputs(folder: Path, n: int) -> tuple[Path, Path]:
    """Write the download CSV and the boundary zip; return their paths."""
    cells = tessellation(n, seed=1, cell_size_m=2_000.0)
    geoids = [f"99{k // 5000 + 1:03d}{k % 5000 * 100 + 100:06d}" for k in range(len(cells))]
    rng = np.random.default_rng(3)
    codes = [f"B03002_{k:03d}{s}" for k in range(1, 22) for s in ("E", "M")]
    table = folder / "ACSDT5Y2099.B03002-Data.csv"
    with open(table, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, quoting=csv.QUOTE_ALL, lineterminator=",\n")
        writer.writerow(["GEO_ID", "NAME", *codes])
        writer.writerow(["Geography", "Geographic Area Name"] + ["Estimate!!Total:"] * len(codes))
        values = rng.integers(0, 3000, size=(len(cells), len(codes)))
        values[:, 0] = values[:, 2:18:2].sum(axis=1) + values[:, 22]  # total >= groups
        for k, g in enumerate(geoids):
            writer.writerow(["1400000US" + g, f"Census Tract {k}", *map(str, values[k])])
    frame = cells[["geometry"]].copy()
    frame["GEOID"] = geoids
    frame["ALAND"] = np.round(frame.geometry.area).astype(np.int64)
    frame["AWATER"] = 0
    frame = frame.set_geometry(shapely.segmentize(frame.geometry.values, 150.0)).to_crs("EPSG:4269")
    shp = folder / "shp"
    shp.mkdir()
    pyogrio.write_dataframe(frame, shp / "cb_2099_us_tract_500k.shp")
    zipped = folder / "cb_2099_us_tract_500k.zip"
    with zipfile.ZipFile(zipped, "w", compression=zipfile.ZIP_DEFLATED) as archive:
        for f in sorted(shp.iterdir()):
            archive.write(f, f.name)
    return table, zipped


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        t0 = time.perf_counter()
        table, zipped = write_inputs(Path(tmp), args.areas)
        print(
            f"setup: {args.areas:,} rows; table {table.stat().st_size / 2**20:.1f} MiB, "
            f"boundary zip {zipped.stat().st_size / 2**20:.1f} MiB "
            f"({time.perf_counter() - t0:.1f} s)"
        )

        def ours_table():
            read = read_census_table(table, id_column=None, role="table")
            counts = [c for c in read.frame.columns if c.startswith("B03002_") and c.endswith("E")]
            for column in counts[:9]:
                _numeric_problem(read.frame[column])
            for margin in read.margins.values():
                parse_margins(read.frame[margin])
            return read

        def base_table():
            return pd.read_csv(table, skiprows=[1])

        def ours_layer():
            layer = read_layer(zipped, layer=None, role="areas")
            detect_id_column([str(c) for c in layer.columns], zipped)
            water_only(layer)
            return layer

        def base_layer():
            return pyogrio.read_dataframe(zipped)

        rows = []
        for name, ours, base in (
            ("table (85k-row download CSV)", ours_table, base_table),
            ("boundaries (tract zip)", ours_layer, base_layer),
        ):
            got, t_ours, m_ours = measure(ours, args.repeat)
            ref, t_base, m_base = measure(base, args.repeat)
            rows.append((name, t_ours, m_ours, t_base, m_base))
            size = len(got.frame) if hasattr(got, "frame") else len(got)
            assert size == len(ref), (size, len(ref))
        spec = spec_from_dict(
            {
                "areas": {"path": str(zipped)},
                "table": [{"path": str(table)}],
                "population": {"preset": "acs_b03002"},
                "footprint": {"ids": ["x"]},
            }
        )
        inputs, t_load, m_load = measure(
            lambda: load_areas(spec.areas, spec.population, tables=spec.tables), 1
        )
        print(f"load_areas analysed {len(inputs.frame):,} areas")
    print(f"{'input':32s} {'ours s':>8s} {'MiB':>7s} {'plain s':>8s} {'MiB':>7s} {'ratio':>6s}")
    for name, t_o, m_o, t_b, m_b in rows:
        print(f"{name:32s} {t_o:8.2f} {m_o:7.0f} {t_b:8.2f} {m_b:7.0f} {t_o / t_b:6.2f}")
    print(
        f"load_areas end to end (both files, validation, join, projection): {t_load:.1f} s, "
        f"{m_load:.0f} MiB traced"
    )
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"process peak RSS: {rss:.0f} MiB")


if __name__ == "__main__":
    main()
