"""Command line: ``coverage-audit run | demo | check``, a thin layer over the Python API.

Every user-facing problem (bad spec, missing file, no CRS, ...) is printed as one
``error:`` line naming the file, row or column and what to do, and the command exits
with status 2; no traceback unless ``--debug``.
"""

from __future__ import annotations

import argparse
import os
import signal
import sys
import time
import warnings
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from . import __version__
from .errors import CoverageAuditError, CoverageAuditWarning, SpecError
from .progress import progress_for

EXIT_OK = 0
EXIT_USER_ERROR = 2
EXIT_INTERNAL_ERROR = 3

DESCRIPTION = (
    "Audit who a service footprint (branch network, delivery zone, assessment area, clinic "
    "or broadband reach) covers, by population group: coverage rates, disparity ratios, "
    "segregation and clustering statistics, unserved enclaves, maps and a report."
)


#: Title of the group of ``run`` options that describe an audit without a spec file.
INLINE_GROUP = "describing the audit without a spec file"


#: The demo region's scenarios, as ``demo.SCENARIOS`` names them (kept here so that the
#: command line starts without loading the geospatial stack; a test checks they agree).
DEMO_SCENARIOS = (
    "delivery",
    "branches",
    "assessment_area",
    "zip_delivery",
    "outreach",
    "lending",
    "clinics",
    "delivery_blocks",
)


def _build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="coverage-audit",
        description=DESCRIPTION,
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="Run 'coverage-audit COMMAND --help' for the options of each command.",
    )
    parser.add_argument("--version", action="version", version=f"coverage_audit {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    run = sub.add_parser(
        "run",
        help="run an audit described by a TOML spec (or by options)",
        description=(
            "Run an audit. Give a TOML spec file, or describe the audit with the options "
            "below (not both: with a spec, edit the spec instead). The analysis settings "
            "override the spec's. Outputs: summary.json, areas.csv, areas.gpkg, "
            "exclusions.csv, manifest.json, map.html, report.html."
        ),
    )
    run.add_argument(
        "spec",
        nargs="?",
        type=Path,
        help="the audit spec, a TOML file (paths in it are relative to it)",
    )
    run.add_argument(
        "--out",
        type=Path,
        default=None,
        help="folder for the outputs, replaced as a whole when the run ends; a folder holding other files is refused (default: outputs/<spec name>)",
    )
    run.add_argument(
        "--open",
        action="store_true",
        help="open report.html and map.html in the web browser afterwards",
    )
    _add_common(run)
    inline = run.add_argument_group(
        INLINE_GROUP,
        "Use these instead of SPEC (a spec given with any of them is refused); "
        "--write-spec saves them as a spec for exact reruns, paths relative to it.",
    )
    inline.add_argument(
        "--areas", type=Path, help="areas layer: GeoPackage, GeoJSON, Shapefile or GeoParquet"
    )
    inline.add_argument(
        "--areas-layer", help="layer name inside the areas file (when it has several)"
    )
    inline.add_argument(
        "--id", dest="id_column", help="column of the areas holding their id (e.g. GEOID)"
    )
    inline.add_argument(
        "--id-width",
        type=int,
        help="zero-pad numeric ids to this many digits (11 tracts, 12 block groups)",
    )
    inline.add_argument(
        "--areas-crs", help='CRS of an areas file that declares none, e.g. "EPSG:4326"'
    )
    inline.add_argument(
        "--table",
        type=Path,
        help="demographics table (CSV or Parquet) joined to the areas on the id",
    )
    inline.add_argument(
        "--table-id", help="id column of the table, when named differently from --id"
    )
    inline.add_argument("--total", help="column with each area's total population")
    inline.add_argument(
        "--group",
        action="append",
        metavar="NAME=COLUMN",
        help="a population group and its count column; repeat for each group",
    )
    inline.add_argument("--reference", help="name of the reference group (e.g. white_nh)")
    inline.add_argument(
        "--derive-minority",
        action="store_true",
        help="add the group 'minority' = total minus the reference group (census convention "
        "when the reference is non-Hispanic white alone)",
    )
    inline.add_argument(
        "--income-ratio",
        help="column with tract median family income as a percent of the area median",
    )
    inline.add_argument(
        "--footprint", type=Path, help="service footprint file: polygons, or points with --radius"
    )
    inline.add_argument(
        "--footprint-name",
        default=None,
        help="a short name for the footprint (default: the file name)",
    )
    inline.add_argument("--footprint-crs", help="CRS of a footprint file that declares none")
    inline.add_argument(
        "--radius",
        help='reach of each service point, e.g. "3000", "3 km", "2 mi" (metres by default)',
    )
    inline.add_argument(
        "--served-ids",
        type=Path,
        help="file listing the served area ids (CSV column or one per line)",
    )
    inline.add_argument("--served-column", help="yes/no column of the areas marking served areas")
    inline.add_argument("--title", help="title of the audit, shown in the report")
    inline.add_argument(
        "--write-spec",
        type=Path,
        help="save the audit described by the options as a TOML spec here",
    )

    demo = sub.add_parser(
        "demo",
        help="run the audits of the fictional demo region Ostmere",
        description=(
            "Run every scenario of the bundled fictional demo region (a delivery zone, a "
            "branch network, an assessment area, an outreach program audited with margins of "
            "error, a mortgage lending review from loan records, clinics with their doctors) "
            "and write each one's outputs."
        ),
    )
    demo.add_argument(
        "--out",
        type=Path,
        default=Path("outputs/demo"),
        help="parent folder of the scenario outputs (default: outputs/demo)",
    )
    demo.add_argument(
        "--scenario",
        action="append",
        choices=DEMO_SCENARIOS,
        help="run only this scenario (repeatable; default: all)",
    )
    demo.add_argument(
        "--open",
        action="store_true",
        help="open each scenario's report.html and map.html in the web browser afterwards",
    )
    demo.add_argument(
        "--regenerate",
        action="store_true",
        help="generate the demo region afresh (from its fixed seed) into OUT/region instead of using the bundled files",
    )
    _add_common(demo)

    check = sub.add_parser(
        "check",
        help="check a spec and its inputs without running the statistics",
        description="Read the spec and every input, report what would be analysed and excluded, and write nothing.",
    )
    check.add_argument("spec", type=Path, help="the audit spec, a TOML file")
    check.add_argument("--debug", action="store_true", help="show a traceback on errors")

    report = sub.add_parser(
        "report",
        help="draw report.html and map.html again from a written output folder",
        description="Read an output folder written by 'run' and draw its report.html and map.html again from its files alone.",
    )
    report.add_argument("folder", type=Path, help="an output folder written by 'run'")
    report.add_argument("--debug", action="store_true", help="show a traceback on errors")

    blocks = sub.add_parser(
        "prepare-blocks",
        help="convert census block files into GeoParquet partitioned by state and county",
        description=(
            "Read block layers (zipped TIGER/Line Shapefiles, Shapefiles, GeoPackages or "
            "GeoParquet) once and write them as GeoParquet partitioned by state and county, "
            'with bounding-box columns, for [blocks] path and engine = "dask".'
        ),
    )
    blocks.add_argument("sources", type=Path, nargs="+", help="block files, all in one CRS")
    blocks.add_argument("--out", type=Path, required=True, help="new output folder")
    blocks.add_argument(
        "--id", default="GEOID20", help="15-digit block GEOID column (default: GEOID20)"
    )
    blocks.add_argument("--debug", action="store_true", help="show a traceback on errors")
    return parser


def _cmd_report(args: argparse.Namespace) -> int:
    from .report.folder import render_folder

    for path in render_folder(args.folder).values():
        print(f"wrote {path}")
    return EXIT_OK


def _cmd_prepare_blocks(args: argparse.Namespace) -> int:
    from .io.blocks import prepare_blocks

    done = prepare_blocks(args.sources, args.out, id_column=args.id)
    print(f"wrote {done['blocks']} blocks in {done['files']} county files to {args.out}")
    return EXIT_OK


def _add_common(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("analysis settings (override the spec)")
    g.add_argument(
        "--threshold",
        type=float,
        help="an area is served when at least this fraction of it is covered (default 0.5)",
    )
    g.add_argument(
        "--comparison",
        choices=["reference", "highest"],
        help="compare each group with the reference group or with the highest-rate group",
    )
    g.add_argument(
        "--contiguity",
        choices=["queen", "rook"],
        help="neighbours share a point (queen) or an edge (rook)",
    )
    g.add_argument(
        "--permutations",
        type=int,
        help="random permutations for the p-values (at least 1; default 999)",
    )
    g.add_argument(
        "--seed", type=int, help="seed of all random draws; the same seed gives the same results"
    )
    g.add_argument("--no-map", action="store_true", help="do not write map.html")
    g.add_argument("--no-report", action="store_true", help="do not write report.html")
    g.add_argument("--quiet", action="store_true", help="print only errors")
    g.add_argument("--debug", action="store_true", help="show a traceback on errors")


def _overrides(args: argparse.Namespace) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, name in (
        ("threshold", "served_threshold"),
        ("comparison", "comparison"),
        ("contiguity", "contiguity"),
        ("permutations", "permutations"),
        ("seed", "seed"),
    ):
        value = getattr(args, key, None)
        if value is not None:
            out[name] = value
    return out


def _path_text(path: Path, relative_to: Path | None) -> str:
    """Absolute path text, or relative to ``relative_to`` (a folder) when given."""
    absolute = path.resolve()
    if relative_to is None:
        return str(absolute)
    try:
        return Path(os.path.relpath(absolute, relative_to.resolve())).as_posix()
    except ValueError:  # another drive (Windows): only an absolute path works
        return str(absolute)


def spec_dict_from_options(
    args: argparse.Namespace, relative_to: Path | None = None
) -> dict[str, Any]:
    """Build a spec mapping from ``run`` options (no spec file).

    Paths are absolute, or relative to the folder ``relative_to`` when given (the folder
    of the spec file written by ``--write-spec``, so that the spec moves with its data).
    """
    missing = [
        flag
        for flag, value in (
            ("--areas", args.areas),
            ("--id", args.id_column),
            ("--total", args.total),
            ("--group", args.group),
            ("--reference", args.reference),
        )
        if not value
    ]
    if missing:
        raise SpecError(
            f"without a spec file, give {', '.join(missing)} (see coverage-audit run --help)"
        )
    groups: dict[str, str] = {}
    for item in args.group:
        if "=" not in item:
            raise SpecError(
                f'--group "{item}" must be NAME=COLUMN, e.g. --group black_nh=B03002_004E'
            )
        name, column = item.split("=", 1)
        groups[name.strip()] = column.strip()
    areas: dict[str, Any] = {"path": _path_text(args.areas, relative_to), "id": args.id_column}
    for key, value in (
        ("layer", args.areas_layer),
        ("crs", args.areas_crs),
        ("table_id", args.table_id),
        ("id_width", args.id_width),
    ):
        if value is not None:
            areas[key] = value
    if args.table is not None:
        areas["table"] = _path_text(args.table, relative_to)
    population: dict[str, Any] = {
        "total": args.total,
        "groups": groups,
        "reference": args.reference,
    }
    if args.derive_minority:
        population["derive_minority"] = True
    if args.income_ratio:
        population["income_ratio"] = args.income_ratio
    footprint: dict[str, Any] = {}
    if args.footprint is not None:
        footprint["path"] = _path_text(args.footprint, relative_to)
        footprint["name"] = args.footprint_name or args.footprint.stem
        if args.radius is not None:
            footprint["kind"] = "points"
            footprint["radius"] = args.radius
        if args.footprint_crs:
            footprint["crs"] = args.footprint_crs
    elif args.served_ids is not None:
        footprint = {
            "name": args.footprint_name or args.served_ids.stem,
            "served_ids": _path_text(args.served_ids, relative_to),
        }
    elif args.served_column:
        footprint = {
            "name": args.footprint_name or args.served_column,
            "served_column": args.served_column,
        }
    else:
        raise SpecError(
            "without a spec file, give a footprint: --footprint FILE [--radius R], --served-ids FILE or --served-column COLUMN"
        )
    data: dict[str, Any] = {"areas": areas, "population": population, "footprint": footprint}
    if args.title:
        data["title"] = args.title
    return data


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(v)}" for k, v in value.items()) + " }"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    text = str(value).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'


def toml_text(data: dict[str, Any]) -> str:
    """Write a spec mapping as TOML (the subset specs use)."""
    lines = ["# coverage_audit spec written by 'coverage-audit run --write-spec'"]
    for key, value in data.items():
        if not isinstance(value, dict):
            lines.append(f"{key} = {_toml_value(value)}")
    for key, value in data.items():
        if isinstance(value, dict):
            lines.append("")
            lines.append(f"[{key}]")
            for k, v in value.items():
                lines.append(f"{k} = {_toml_value(v)}")
    return "\n".join(lines) + "\n"


def _run_one(spec: Any, out: Path, args: argparse.Namespace, stream: Any) -> dict[str, Any]:
    from .audit import run_audit
    from .outputs import claim_output_dir
    from .spec import replace_output

    progress = progress_for(sys.stderr, args.quiet)
    if args.no_map or args.no_report:
        spec = replace_output(
            spec,
            map=not args.no_map and spec.output.map,
            report=not args.no_report and spec.output.report,
        )
    t0 = time.perf_counter()
    # The output folder is checked and locked before the analysis, not after it.
    with claim_output_dir(out) as claim:
        result = run_audit(spec, progress=progress)
        paths = result.write(out, progress=progress, claim=claim)
    if not args.quiet:
        from .console import print_summary

        print_summary(result, paths, seconds=time.perf_counter() - t0, stream=stream)
    if getattr(args, "open", False):
        import webbrowser

        for key in ("report", "map"):
            if key in paths:
                webbrowser.open(paths[key].resolve().as_uri())
    return result.summary


def _inline_options_given(parser: argparse.ArgumentParser, args: argparse.Namespace) -> list[str]:
    """Return the options of the inline group that were given (differ from their default)."""
    run = _subparser(parser, "run")
    given = []
    for group in run._action_groups:
        if group.title != INLINE_GROUP:
            continue
        for action in group._group_actions:
            value = getattr(args, action.dest, None)
            if value is not None and value != action.default:
                given.append(action.option_strings[0])
    return given


def _subparser(parser: argparse.ArgumentParser, name: str) -> argparse.ArgumentParser:
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            return action.choices[name]
    raise KeyError(name)  # pragma: no cover


def _cmd_run(args: argparse.Namespace) -> int:
    from .spec import load_spec, spec_from_dict

    if args.spec is not None:
        given = _inline_options_given(_build_parser(), args)
        if given:
            what = "options" if len(given) > 1 else "option"
            verb = "describe" if len(given) > 1 else "describes"
            raise SpecError(
                f"the {what} {', '.join(given)} {verb} an audit without a spec file and cannot "
                f"be combined with the spec '{args.spec}'; change the spec instead (e.g. "
                "[footprint] path or radius), or leave the spec out and describe the whole "
                "audit with options (see coverage-audit run --help)"
            )
        spec = load_spec(args.spec)
        default_out = Path("outputs") / args.spec.stem
    else:
        data = spec_dict_from_options(args)
        if args.write_spec is not None:
            from .outputs import write_text

            relative = spec_dict_from_options(args, relative_to=args.write_spec.parent)
            try:
                write_text(args.write_spec, toml_text(relative))
            except OSError as exc:
                from .outputs import folder_problem

                raise SpecError(
                    folder_problem(args.write_spec, exc, "--write-spec file", "--write-spec")
                ) from None
        spec = spec_from_dict(data, base_dir=Path.cwd(), source="options")
        default_out = Path("outputs") / spec.footprint.name
    overrides = _overrides(args)
    if overrides:
        spec = spec.with_analysis(**overrides)
    _run_one(spec, args.out or default_out, args, sys.stdout)
    return EXIT_OK


def _cmd_demo(args: argparse.Namespace) -> int:
    from .demo import BLOCK_SCENARIO, DEMO_NAME, MARGIN_SCENARIO, SCENARIOS, write_demo_region
    from .outputs import prepare_output_dir
    from .spec import load_spec

    prepare_output_dir(args.out)  # a parent that cannot be used fails before any work
    bundled = Path(__file__).resolve().parent.parent / "demo_regions" / DEMO_NAME
    if args.regenerate or not (bundled / "delivery.toml").is_file():
        region = write_demo_region(args.out / "region")
    else:
        region = bundled
    scenarios = args.scenario or [*SCENARIOS, MARGIN_SCENARIO, BLOCK_SCENARIO]
    for name in scenarios:
        spec = load_spec(region / f"{name}.toml")
        overrides = _overrides(args)
        if overrides:
            spec = spec.with_analysis(**overrides)
        _run_one(spec, args.out / name, args, sys.stdout)
    if not args.quiet:
        print(
            f"\nDemo region: {region}\nOpen {args.out / scenarios[0] / 'report.html'} in a browser to read the first report."
        )
    return EXIT_OK


def _cmd_check(args: argparse.Namespace) -> int:
    """Read every input as ``run`` would and say, per input, what was read and matched.

    Lines are printed as each input is read, so a failing join (an error, exit 2) comes
    after the inputs that were fine.
    """
    from .footprint import build_footprint
    from .inputs import load_areas
    from .io.activity import read_activity
    from .spec import load_spec

    spec = load_spec(args.spec)
    print(f"spec {args.spec}: readable")
    inputs = load_areas(
        spec.areas,
        spec.population,
        analysis_crs=spec.analysis.analysis_crs,
        tables=spec.tables,
    )
    source_crs = inputs.source_crs.to_authority()
    crs_name = ":".join(source_crs) if source_crs else inputs.source_crs.name
    print(
        f"areas: {spec.areas.path} ({inputs.layout}, {crs_name}), id column {inputs.id_column}: "
        f"{inputs.input_rows} rows, {len(inputs.frame)} would be analysed, "
        f"{inputs.exclusions.count('areas')} excluded"
    )
    if inputs.water_only:
        print(
            f"  {len(inputs.water_only)} water-only areas (ALAND = 0), kept: "
            f"{', '.join(inputs.water_only[:5])}{' ...' if len(inputs.water_only) > 5 else ''}"
        )
    for match in inputs.matches:
        print(match.line())
    pop = inputs.population or spec.population
    labels = pop.group_labels
    moes = pop.group_moes
    print(
        f"population: total {pop.total} ({pop.unit}); groups "
        + "; ".join(
            f"{labels[g]} = {c}" + (f" (margin {moes[g]})" if g in moes else "")
            for g, c in pop.groups
        )
    )
    built = []
    for fp in spec.footprints:
        footprint = build_footprint(
            fp,
            inputs,
            inputs.exclusions,
            circle_vertices=spec.analysis.circle_vertices,
            id_width=spec.areas.id_width,
        )
        built.append(footprint)
        line = f"footprint '{fp.name}' ({fp.kind}): {footprint.features} features"
        if fp.kind == "zips" and footprint.match is not None:
            line = (
                f"footprint '{fp.name}' (ZIP codes, "
                f"{footprint.match.layout or 'relationship file'}): {footprint.features} ZIP "
                f"codes with a ZCTA or crosswalk row; {footprint.match.matched} areas reached"
            )
        elif footprint.match is not None:
            rate = footprint.match.match_rate
            line += f"; {footprint.match.matched} of {footprint.match.rows} ids matched" + (
                "" if rate is None else f" ({rate:.1%})"
            )
        print(line)
    if spec.study_area is not None:
        from .study_area import apply_study_area

        inputs, study, _ = apply_study_area(
            spec.study_area, inputs, built[0], id_width=spec.areas.id_width
        )
        print(
            f"study area '{study.name}' ({study.kind}): {study.areas_inside} areas inside, "
            f"{study.areas_outside} outside; {len(inputs.frame)} would be analysed"
        )
    if spec.blocks is not None:
        from .blocks_check import check_blocks

        for line in check_blocks(spec, inputs):
            print(line)
    if spec.activity is not None:
        _, _, match = read_activity(spec, inputs.frame[inputs.id_column].tolist())
        print(match.line())
    ex = inputs.exclusions
    print(f"exclusions: {ex.count()} rows would be left out")
    for reason, n in ex.by_reason().items():
        print(f"  {n:6d}  {reason}")
    print(f"analysis CRS: {inputs.analysis_crs.srs}")
    if spec.lending is not None:
        from .io.hmda import read_header

        for path in spec.lending.path:
            delimiter, names = read_header(path)
            print(f"lending records {path.name}: header of {len(names)} fields, '{delimiter}'")
    return EXIT_OK


class Interrupted(KeyboardInterrupt):
    """Raised by the signal handler for Ctrl-C (SIGINT) and SIGTERM alike."""

    def __init__(self, signum: int) -> None:
        super().__init__(signum)
        self.signum = signum


def _on_signal(signum: int, frame: Any) -> None:
    raise Interrupted(signum)


def _install_signal_handlers() -> dict[int, Any]:
    """Handle SIGINT and SIGTERM alike (clean stop, exit 130/143); return the old handlers."""
    previous: dict[int, Any] = {}
    for name in ("SIGINT", "SIGTERM"):
        kind = getattr(signal, name, None)
        if kind is None:  # pragma: no cover - SIGTERM handling needs a POSIX system
            continue
        try:
            previous[kind] = signal.signal(kind, _on_signal)
        except ValueError:  # not the main thread: leave the handlers alone
            break
    return previous


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``coverage-audit`` command."""
    # First thing: an interruption from here on ends with one line, never a traceback.
    previous = _install_signal_handlers()
    try:
        return _main(argv)
    except KeyboardInterrupt as exc:
        signum = getattr(exc, "signum", signal.SIGINT)
        print(
            "interrupted; an output folder holds either a run's complete outputs or, "
            "untouched, the earlier ones",
            file=sys.stderr,
        )
        return 128 + int(signum)
    finally:
        for kind, handler in previous.items():
            signal.signal(kind, handler if handler is not None else signal.SIG_DFL)


def _main(argv: Sequence[str] | None) -> int:
    parser = _build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return EXIT_USER_ERROR
    handlers = {
        "run": _cmd_run,
        "demo": _cmd_demo,
        "check": _cmd_check,
        "report": _cmd_report,
        "prepare-blocks": _cmd_prepare_blocks,
    }
    debug = getattr(args, "debug", False)
    try:
        with warnings.catch_warnings():
            # Our own warnings are shown once each, as one line, not with source lines.
            warnings.simplefilter("default", CoverageAuditWarning)
            warnings.showwarning = _show_warning
            return handlers[args.command](args)
    except CoverageAuditError as exc:
        if debug:
            raise
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_USER_ERROR
    except KeyboardInterrupt:
        raise
    except Exception as exc:  # an internal fault: say so plainly, keep details for --debug
        if debug:
            raise
        print(
            f"internal error: {type(exc).__name__}: {exc}\n"
            "This is a fault of coverage_audit, not of your inputs; rerun with --debug and "
            "report the traceback.",
            file=sys.stderr,
        )
        return EXIT_INTERNAL_ERROR


def _show_warning(
    message: Any, category: Any, filename: str, lineno: int, file: Any = None, line: Any = None
) -> None:
    name = getattr(category, "__name__", "Warning")
    print(f"warning ({name}): {message}", file=sys.stderr)


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())
