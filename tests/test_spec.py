"""Spec: TOML reading, validation messages, defaults, several footprints."""

from __future__ import annotations

import pytest

from coverage_audit.errors import SpecError
from coverage_audit.spec import DEFAULT_SEED, load_spec, spec_from_dict

BASE = {
    "areas": {"path": "a.gpkg", "id": "geoid"},
    "population": {"total": "t", "groups": {"white": "w", "black": "b"}, "reference": "white"},
    "footprint": {"path": "f.gpkg"},
}


def _with(**parts):
    data = {k: dict(v) for k, v in BASE.items()}
    for key, value in parts.items():
        if value is None:
            data.pop(key)
        elif isinstance(value, dict) and key in data:
            data[key] = {**data[key], **value}
        else:
            data[key] = value
    return data


def test_defaults_and_relative_paths(tmp_path):
    spec = spec_from_dict(BASE, base_dir=tmp_path)
    assert spec.areas.path == tmp_path / "a.gpkg"
    assert spec.footprint.kind == "polygons"
    assert spec.analysis.served_threshold == 0.5
    assert spec.analysis.seed == DEFAULT_SEED
    assert spec.population.group_names == ["white", "black"]


def test_unknown_key_names_it_and_lists_allowed():
    with pytest.raises(
        SpecError,
        match=r'unknown key "treshold" in \[analysis\]; allowed keys are \[.*served_threshold',
    ):
        spec_from_dict(_with(analysis={"treshold": 0.5}))
    with pytest.raises(SpecError, match='unknown key "colour" in top level'):
        spec_from_dict(_with(colour="red"))


@pytest.mark.parametrize(
    ("parts", "message"),
    [
        ({"areas": None}, r"the \[areas\] table is missing"),
        (
            {"analysis": {"served_threshold": 1.5}},
            "served_threshold was 1.5 but must be above 0.0 and at most 1.0",
        ),
        ({"analysis": {"served_threshold": 0}}, "served_threshold was 0.0 but must be above 0.0"),
        (
            {"analysis": {"contiguity": "bishop"}},
            r'contiguity was "bishop" but is expected to be one of \[.queen., .rook.\]',
        ),
        ({"analysis": {"permutations": 9.5}}, "permutations must be a whole number"),
        ({"analysis": {"seed": -1}}, "seed was -1 but must be at least 0"),
        (
            {"population": {"reference": "asian"}},
            'reference was "asian" but must be one of the groups',
        ),
        ({"population": {"groups": {"population": "p"}, "reference": "population"}}, "is reserved"),
        ({"population": {"groups": {"9lives": "p"}}}, "must start with a letter"),
        ({"population": {"derive_minority": "yes"}}, "derive_minority must be true or false"),
        ({"footprint": {"kind": "hexagons", "path": "x"}}, 'kind was "hexagons"'),
        ({"footprint": {"path": None}}, "needs a path"),
        ({"footprint": {"path": "p.gpkg", "radius": "3 parsecs"}}, 'unit "parsecs" is not known'),
    ],
)
def test_bad_values_are_named(parts, message):
    with pytest.raises(SpecError, match=message):
        spec_from_dict(_with(**parts))


def test_several_footprints_need_distinct_names():
    data = _with(footprint=[{"path": "a.gpkg", "name": "x"}, {"path": "b.gpkg", "name": "x"}])
    with pytest.raises(SpecError, match="footprint names must differ"):
        spec_from_dict(data)
    spec = spec_from_dict(
        _with(footprint=[{"path": "a.gpkg", "name": "x"}, {"path": "b.gpkg", "name": "y"}])
    )
    assert [f.name for f in spec.footprints] == ["x", "y"]


def test_toml_errors_name_the_file(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text("[areas\npath = 1", encoding="utf-8")
    with pytest.raises(SpecError, match="bad.toml: not valid TOML"):
        load_spec(bad)
    with pytest.raises(SpecError, match="was not found"):
        load_spec(tmp_path / "missing.toml")


def test_with_analysis_revalidates():
    spec = spec_from_dict(BASE)
    assert spec.with_analysis(seed=7).analysis.seed == 7
    with pytest.raises(SpecError, match="served_threshold"):
        spec.with_analysis(served_threshold=2.0)


def test_derive_minority_conflicts_with_named_minority_group():
    with pytest.raises(SpecError, match='group named "minority" and derive_minority'):
        spec_from_dict(
            _with(population={"groups": {"white": "w", "minority": "m"}, "derive_minority": True})
        )
