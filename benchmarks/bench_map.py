"""Benchmark of the offline map against a plain folium.GeoJson baseline, same run.

Builds the fictional pipeline output of about 85,000 areas (the nationwide tract count)
with tests/test_map.make_inputs, then measures:

- ours: coverage_audit.report.build_map at full size: build time, file size, peak memory,
  and the time headless Chromium needs to open the page until every area is drawn and
  painted (the page sets ``coverageAuditMap.painted``), with its JS heap;
- baseline: a plain ``folium.GeoJson`` map of the full, unsimplified geometry with a
  ``GeoJsonTooltip`` per feature (folium's usual recipe, SVG renderer, one layer), on a
  subset of areas (default 10,000: at 85,000 it does not open in reasonable time), with
  Leaflet pointed at the installed copy so it can open offline; ours is measured on the
  same subset, and the ratios baseline/ours are printed;
- the baseline's file size at full size is also built and reported (not opened).

Each build runs in a child process whose peak resident memory (VmHWM) is read at the
end, beside tracemalloc's peak of Python allocations. The browser has the network
blocked (the same harness as the tests, without the request log, which slows large
pages). Usage: python benchmarks/bench_map.py [--areas 85000] [--subset 10000]
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

BUDGET_MB = 40.0  # from the brief: an 85,000-area map stays under 40 MB
BUDGET_OPEN_S = 15.0  # and opens in headless Chromium in under 15 s


def _peak_rss_mb() -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def _inputs(n_areas: int, subset: int | None):
    from tests.test_map import make_inputs

    areas, footprint, summary = make_inputs(n_areas, kind="polygons")
    if subset is not None and subset < len(areas):
        areas = areas.iloc[:subset].copy()
        summary = {**summary, "areas": {"input": subset, "analysed": subset, "excluded": 0}}
    return areas, footprint, summary


def _build_ours(n_areas: int, subset: int | None, path: str, queue) -> None:
    from coverage_audit.report import build_map
    from tests.test_map import GROUPS, REFERENCE

    areas, footprint, summary = _inputs(n_areas, subset)
    tracemalloc.start()
    t0 = time.perf_counter()
    info = build_map(
        areas,
        id_column="geoid",
        groups=GROUPS,
        reference=REFERENCE,
        footprint=footprint,
        summary=summary,
        title="Benchmark map",
        path=path,
    )
    seconds = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    queue.put(
        {
            "seconds": seconds,
            "bytes": info.bytes,
            "features": info.n_features,
            "py_peak_mb": peak / 2**20,
            "rss_peak_mb": _peak_rss_mb(),
            "tolerance_m": info.simplify_tolerance,
            "decimals": info.coordinate_decimals,
        }
    )


def _build_baseline(n_areas: int, subset: int | None, path: str, queue) -> None:
    import folium

    from coverage_audit.report.assets import leaflet_dir
    from tests.test_map import GROUPS

    class LocalLeafletMap(folium.Map):
        # Same folium Map, with Leaflet from the installed package so the page can open
        # with the network blocked; jQuery/Bootstrap are not needed by GeoJson/tooltips.
        default_js = [("leaflet", (leaflet_dir() / "leaflet.js").as_uri())]
        default_css = [("leaflet_css", (leaflet_dir() / "leaflet.css").as_uri())]

    areas, _, _ = _inputs(n_areas, subset)
    fields = ["geoid", "population", "covered_fraction", "served", *[f"{g}_share" for g in GROUPS]]
    fields += ["income_tier", "lisa_cluster", "enclave_id", "name"]
    tracemalloc.start()
    t0 = time.perf_counter()
    frame = areas[[*fields, "geometry"]].to_crs(4326)
    frame["served"] = frame["served"].astype(bool)
    xmin, ymin, xmax, ymax = frame.total_bounds
    fmap = LocalLeafletMap(
        location=[(ymin + ymax) / 2, (xmin + xmax) / 2], zoom_start=6, tiles=None
    )
    folium.GeoJson(
        frame,
        style_function=lambda f: {"fillColor": "#4fa79b", "color": "#ffffff", "weight": 0.5},
        tooltip=folium.GeoJsonTooltip(fields=fields),
    ).add_to(fmap)
    fmap.fit_bounds([[ymin, xmin], [ymax, xmax]])
    fmap.save(path)
    seconds = time.perf_counter() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    queue.put(
        {
            "seconds": seconds,
            "bytes": Path(path).stat().st_size,
            "features": len(frame),
            "py_peak_mb": peak / 2**20,
            "rss_peak_mb": _peak_rss_mb(),
        }
    )


def _in_child(target, *args) -> dict:
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    proc = ctx.Process(target=target, args=(*args, queue))
    proc.start()
    result = queue.get()
    proc.join()
    return result


def _open(driver, path: str, ready: str, timeout: float) -> dict:
    """Navigate to ``path`` and poll ``ready``; return wall seconds and in-page figures."""
    driver.get("about:blank")
    driver.execute_cdp_cmd("HeapProfiler.collectGarbage", {})
    t0 = time.perf_counter()
    driver.get(Path(path).as_uri())
    deadline = t0 + timeout
    while not driver.execute_script(f"return !!({ready});"):
        if time.perf_counter() > deadline:
            return {"wall_s": float("nan"), "timed_out": True}
        time.sleep(0.05)
    wall = time.perf_counter() - t0
    driver.execute_cdp_cmd("HeapProfiler.collectGarbage", {})
    metrics = driver.execute_cdp_cmd("Performance.getMetrics", {})["metrics"]
    heap = next((m["value"] for m in metrics if m["name"] == "JSHeapUsedSize"), float("nan"))
    load = driver.execute_script(
        "var t = performance.timing; return t.loadEventEnd - t.navigationStart;"
    )
    errors = [e["message"] for e in driver.get_log("browser") if e.get("level") == "SEVERE"]
    return {"wall_s": wall, "load_s": load / 1000, "heap_mb": heap / 2**20, "errors": errors}


def _fmt_row(name: str, r: dict) -> str:
    return (
        f"{name:<34} {r['features']:>7,d} {r['bytes'] / 1e6:>9.2f} {r['seconds']:>8.2f} "
        f"{r['rss_peak_mb']:>9.0f} {r['py_peak_mb']:>8.0f} {r.get('wall_s', float('nan')):>8.2f} "
        f"{r.get('heap_mb', float('nan')):>8.0f}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(
        description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter
    )
    parser.add_argument("--areas", type=int, default=85_000)
    parser.add_argument("--subset", type=int, default=10_000)
    parser.add_argument("--skip-full-baseline", action="store_true")
    parser.add_argument("--open-timeout", type=float, default=180.0)
    args = parser.parse_args()

    from tests.browser import chromium_missing, start_chromium

    out = Path(tempfile.mkdtemp(prefix="bench-map-"))
    ours_full_path = str(out / "ours_full.html")
    ours_sub_path = str(out / "ours_subset.html")
    base_sub_path = str(out / "baseline_subset.html")
    base_full_path = str(out / "baseline_full.html")

    print(f"building {args.areas:,} fictional areas; subset {args.subset:,}; files in {out}")
    ours_full = _in_child(_build_ours, args.areas, None, ours_full_path)
    ours_sub = _in_child(_build_ours, args.areas, args.subset, ours_sub_path)
    base_sub = _in_child(_build_baseline, args.areas, args.subset, base_sub_path)
    base_full = None
    if not args.skip_full_baseline:
        base_full = _in_child(_build_baseline, args.areas, None, base_full_path)

    reason = chromium_missing()
    if reason:
        print(f"browser timings skipped: {reason}")
    else:
        profile = tempfile.mkdtemp(prefix="bench-chromium-")
        driver = start_chromium(profile, network_log=False)
        driver.execute_cdp_cmd("Performance.enable", {})
        driver.execute_cdp_cmd("HeapProfiler.enable", {})
        try:
            ours_ready = "window.coverageAuditMap && window.coverageAuditMap.painted"
            for result, path in ((ours_full, ours_full_path), (ours_sub, ours_sub_path)):
                result.update(_open(driver, path, ours_ready, args.open_timeout))
                result["drawn"] = driver.execute_script("return coverageAuditMap.drawn")
            # The baseline draws one SVG path per feature; it is open once all are there.
            n = base_sub["features"]
            base_ready = (
                f"document.querySelectorAll('path.leaflet-interactive').length >= {n} && "
                "document.readyState === 'complete'"
            )
            base_sub.update(_open(driver, base_sub_path, base_ready, args.open_timeout))
            base_sub["drawn"] = driver.execute_script(
                "return document.querySelectorAll('path.leaflet-interactive').length"
            )
        finally:
            driver.quit()

    print()
    print("baseline measured in the same run: folium.GeoJson, full geometry, GeoJsonTooltip")
    head = (
        f"{'map':<34} {'areas':>7} {'size MB':>9} {'build s':>8} {'RSS MB':>9} "
        f"{'py MB':>8} {'open s':>8} {'heap MB':>8}"
    )
    print(head)
    print("-" * len(head))
    print(_fmt_row("ours, full", ours_full))
    print(_fmt_row("ours, subset", ours_sub))
    print(_fmt_row("baseline, subset", base_sub))
    if base_full is not None:
        print(_fmt_row("baseline, full (not opened)", base_full))
    print()
    print("ratios baseline / ours on the subset (higher is better for ours):")
    print(f"  file size    {base_sub['bytes'] / ours_sub['bytes']:6.2f} x")
    print(f"  build time   {base_sub['seconds'] / ours_sub['seconds']:6.2f} x")
    if "wall_s" in ours_sub and "wall_s" in base_sub:
        print(f"  open time    {base_sub['wall_s'] / ours_sub['wall_s']:6.2f} x")
        print(f"  JS heap      {base_sub['heap_mb'] / ours_sub['heap_mb']:6.2f} x")
    if base_full is not None:
        print(f"  full size    {base_full['bytes'] / ours_full['bytes']:6.2f} x (not opened)")
    print()
    size_mb = ours_full["bytes"] / 1e6
    print(
        f"budget: size {size_mb:.1f} MB (limit {BUDGET_MB:.0f}) -> "
        f"{'ok' if size_mb < BUDGET_MB else 'OVER'}"
    )
    if "wall_s" in ours_full:
        wall = ours_full["wall_s"]
        print(
            f"budget: open {wall:.1f} s (limit {BUDGET_OPEN_S:.0f}), in-page load "
            f"{ours_full['load_s']:.1f} s, drawn {ours_full['drawn']:,} of "
            f"{ours_full['features']:,} -> {'ok' if wall < BUDGET_OPEN_S else 'OVER'}"
        )
        for name, r in (
            ("ours full", ours_full),
            ("ours subset", ours_sub),
            ("baseline subset", base_sub),
        ):
            if r.get("errors"):
                print(f"console errors ({name}): {r['errors'][:3]}")
    print(
        f"ours: display tolerance {ours_full['tolerance_m']:.1f} m, "
        f"{ours_full['decimals']} decimals"
    )


if __name__ == "__main__":
    main()
