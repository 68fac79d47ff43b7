"""Streaming read of HMDA-layout records: rows per second and peak memory vs plain pandas.

Generates a 5-million-row file in the published public layout (all 99 fields, pipe-
delimited; about 2 GB) from fictional lenders and tracts, then, each in its own process so
that peak resident memory is measured separately, in one run:

- ours: :class:`coverage_audit.io.hmda.RecordReader` (pyarrow block streaming, the
  columns the review needs, every record validated, malformed ones listed, filters
  applied), reduced chunk by chunk to counts by year, market, lender, tract and action,
  as the lending stage does;
- baseline "plain pandas": ``pandas.read_csv(usecols=..., dtype=str)`` of the same
  columns in one go, then the same filter and counts (no validation).

Peak memory is each process's peak resident set size (``VmHWM``), which includes the
interpreter and libraries (about the same in both).

Run: .venv/bin/python benchmarks/bench_lending.py [--rows 5000000] [--keep PATH]
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

SEED = 15
BLOCK_ROWS = 250_000
COLUMNS = [
    "activity_year",
    "lei",
    "derived_msa-md",
    "census_tract",
    "action_taken",
    "loan_purpose",
    "derived_race",
    "derived_ethnicity",
]
KEYS = ["activity_year", "derived_msa-md", "lei", "census_tract", "action_taken"]
PURPOSES = {"1", "31", "32"}


def generate(path: Path, rows: int) -> float:
    """Write ``rows`` records (a 250,000-row block drawn once, repeated); return seconds."""
    from coverage_audit.synthetic_lending import FictionalLender, fictional_lei, lending_records

    start = time.perf_counter()
    rng = np.random.default_rng(SEED)
    n_tracts = 20_000
    tracts = pd.DataFrame(
        {
            "geoid": [f"99{k // 400:03d}{k:06d}" for k in range(n_tracts)],
            "minority_pct": np.round(rng.uniform(0, 100, n_tracts), 2),
            "income_pct": np.round(rng.uniform(30, 200, n_tracts), 2),
            "population": rng.integers(1_000, 8_000, n_tracts),
            "households": rng.integers(300, 3_000, n_tracts),
        }
    )
    lenders = [
        FictionalLender(
            fictional_lei(f"BENCH{k}", k % 100), f"Lender {k}", 5_000, float(rng.uniform(0.5, 1.5))
        )
        for k in range(BLOCK_ROWS // 5_000)
    ]
    parts = []
    for m in range(10):  # ten fictional markets of 2,000 tracts each
        sub = tracts.iloc[m * 2_000 : (m + 1) * 2_000]
        parts.append(
            lending_records(
                sub, lenders[m * 5 : (m + 1) * 5], (2022,), rng, msa=f"9{m:04d}", na_tracts=20
            )
        )
    block = pd.concat(parts, ignore_index=True)
    header = "|".join(block.columns) + "\n"
    body = block.to_csv(sep="|", index=False, header=False, lineterminator="\n")
    lines = body.count("\n")
    with open(path, "w", encoding="utf-8") as handle:
        handle.write(header)
        written = 0
        while written < rows:
            if rows - written >= lines:
                handle.write(body)
                written += lines
            else:
                take = rows - written
                handle.write("".join(body.splitlines(keepends=True)[:take]))
                written += take
    return time.perf_counter() - start


def run_ours(path: Path) -> dict:
    from coverage_audit.io.hmda import RecordFilters, RecordReader

    start = time.perf_counter()
    reader = RecordReader(
        path,
        COLUMNS,
        filters=RecordFilters(years=frozenset({2022}), loan_purpose=frozenset(PURPOSES)),
    )
    parts = [chunk.groupby(KEYS, sort=False).size().rename("n").reset_index() for chunk in reader]
    counts = pd.concat(parts).groupby(KEYS)["n"].sum()
    seconds = time.perf_counter() - start
    return {
        "seconds": seconds,
        "rows": reader.counts.lines,
        "kept": reader.counts.kept,
        "malformed": int(sum(reader.counts.malformed.values())),
        "filtered": int(sum(reader.counts.filtered.values())),
        "cells": int(len(counts)),
        "total": int(counts.sum()),
    }


def run_pandas(path: Path) -> dict:
    start = time.perf_counter()
    frame = pd.read_csv(path, sep="|", usecols=COLUMNS, dtype=str, keep_default_na=False)
    rows = len(frame)
    keep = (frame["activity_year"] == "2022") & frame["loan_purpose"].isin(PURPOSES)
    keep &= frame["census_tract"] != "NA"
    counts = frame.loc[keep].groupby(KEYS).size()
    seconds = time.perf_counter() - start
    return {
        "seconds": seconds,
        "rows": rows,
        "kept": int(keep.sum()),
        "cells": int(len(counts)),
        "total": int(counts.sum()),
    }


def peak_rss_mb() -> float:
    """Peak resident memory of this process since its exec (VmHWM; ru_maxrss would carry
    the parent's peak over the fork)."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) / 1024
    except OSError:  # pragma: no cover - not Linux
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def child(kind: str, path: Path) -> None:
    out = run_ours(path) if kind == "ours" else run_pandas(path)
    out["peak_rss_mb"] = peak_rss_mb()
    print(json.dumps(out))


def measure(kind: str, path: Path) -> dict:
    done = subprocess.run(
        [sys.executable, __file__, "--child", kind, str(path)],
        check=True,
        capture_output=True,
        text=True,
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=5_000_000)
    parser.add_argument("--keep", type=Path, default=None, help="write the file here and keep it")
    parser.add_argument("--child", nargs=2, default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], Path(args.child[1]))
        return
    with tempfile.TemporaryDirectory() as tmp:
        path = args.keep or Path(tmp) / "records.txt"
        gen = generate(path, args.rows)
        size = path.stat().st_size / 2**30
        print(
            f"generated {args.rows:,} records in the public layout ({size:.2f} GB) in {gen:.0f} s"
        )
        ours = measure("ours", path)
        base = measure("pandas", path)
    for name, r in (("ours (streamed, validated)", ours), ("plain pandas read_csv", base)):
        print(
            f"{name:28s} {r['seconds']:7.1f} s  {r['rows'] / r['seconds']:>10,.0f} rows/s  "
            f"peak RSS {r['peak_rss_mb']:7.0f} MB  kept {r['kept']:,}  cells {r['cells']:,}"
        )
    print(
        f"ratio ours/pandas: time {ours['seconds'] / base['seconds']:.2f}x, "
        f"peak memory {ours['peak_rss_mb'] / base['peak_rss_mb']:.2f}x; "
        f"ours also listed {ours['malformed']:,} malformed and counted {ours['filtered']:,} "
        "filtered records"
    )
    assert ours["total"] == base["total"], "the two reads disagree on the counts"


if __name__ == "__main__":
    main()
