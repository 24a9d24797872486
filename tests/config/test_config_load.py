"""Configuration loading: valid files, and each bad input with a clear message (file, key path, line)."""

from __future__ import annotations

import re
from pathlib import Path

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from lakefeed.config import LakeConfig, find_lake_files, load_lake, load_project, load_projects, load_sources
from lakefeed.exceptions import ConfigError

LAKE = {
    "id": "mini",
    "name": "Mini Reservoir",
    "timezone": "Europe/Berlin",
    "sources": "sources.yaml",
    "lake": {"path": "../geometry/lake.gpkg"},
    "aois": {"path": "../geometry/aois.gpkg"},
    "subbasins": {"path": "../geometry/subbasins.gpkg", "lake_id": "LAKE", "outside_ids": ["OUTSIDE"]},
    "sensors": {"kite": {"pixel_size_m": 20, "reference": True}},
}
SOURCES = {
    "weather": {"paths": ["../weather/*.nc"], "accumulation": {"precipitation": {"kind": "since_reset"}}},
    "hydrology": {"path": "../hydrology/subbasin_daily.nc"},
}


def write(tmp_path: Path, lake: dict | str = LAKE, sources: dict | str = SOURCES) -> Path:
    cfg = tmp_path / "config"
    cfg.mkdir(exist_ok=True)
    (cfg / "sources.yaml").write_text(sources if isinstance(sources, str) else yaml.safe_dump(sources))
    path = cfg / "lake-mini.yaml"
    path.write_text(lake if isinstance(lake, str) else yaml.safe_dump(lake, sort_keys=False))
    return path


def problems(err: pytest.ExceptionInfo[ConfigError]) -> str:
    return "\n".join(err.value.problems) or str(err.value)


def test_valid_config_loads_with_absolute_paths(tmp_path: Path) -> None:
    project = load_project(write(tmp_path))
    assert project.id == "mini"
    assert isinstance(project.lake, LakeConfig)
    assert project.lake.lake.path == (tmp_path / "geometry" / "lake.gpkg").resolve()
    assert project.lake.subbasins.outside_ids == ["OUTSIDE"]
    default = load_lake(write(tmp_path, {**LAKE, "subbasins": {"path": "s.gpkg"}}))
    assert default.subbasins.outside_ids == ["0", "-1", "NONE", "NAN", "OUTSIDE"]
    assert project.sources.weather is not None
    assert project.sources.weather.paths == [str(tmp_path.resolve() / "weather" / "*.nc")]


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="not found") as err:
        load_project(tmp_path / "nope.yaml")
    assert "nope.yaml" in problems(err)


def test_missing_sources_file_names_the_key(tmp_path: Path) -> None:
    path = write(tmp_path, {**LAKE, "sources": "elsewhere.yaml"})
    with pytest.raises(ConfigError) as err:
        load_project(path)
    assert "sources: sources config not found" in problems(err)
    assert "elsewhere.yaml" in problems(err)


def test_yaml_syntax_error_gives_line(tmp_path: Path) -> None:
    text = "id: mini\nname: Mini\ntimezone: [Europe/Berlin\nsources: sources.yaml\n"
    with pytest.raises(ConfigError, match=r"line \d+, column \d+: YAML syntax error") as err:
        load_lake(write(tmp_path, text))
    # the unclosed flow sequence opened on line 3 is detected where it should have closed
    assert "line 4" in str(err.value) or "line 3" in str(err.value)


def test_unknown_key_did_you_mean_with_line(tmp_path: Path) -> None:
    text = yaml.safe_dump(LAKE, sort_keys=False)
    path = write(tmp_path, text + "timezon: UTC\n")
    with pytest.raises(ConfigError) as err:
        load_lake(path)
    line = text.count("\n") + 1
    text = problems(err)
    assert f"timezon (line {line}): unknown key; did you mean 'timezone'?" in text
    assert str(path) in text


def test_unknown_nested_key_under_a_dict_of_models(tmp_path: Path) -> None:
    lake = {**LAKE, "sensors": {"kite": {"pixle_size_m": 20}}}
    with pytest.raises(ConfigError) as err:
        load_lake(write(tmp_path, lake))
    text = problems(err)
    assert "sensors.kite.pixle_size_m" in text
    assert "did you mean 'pixel_size_m'?" in text
    assert "sensors.kite.pixel_size_m" in text and "required key is missing" in text


def test_unknown_key_in_sources(tmp_path: Path) -> None:
    sources = {**SOURCES, "wether": {"paths": []}}
    with pytest.raises(ConfigError) as err:
        load_sources(write(tmp_path, LAKE, sources).parent / "sources.yaml")
    assert "wether" in problems(err) and "did you mean 'weather'?" in problems(err)


@pytest.mark.parametrize("bad", ["a/b", "..", "../up", "my lake", "Tallow", "x.y", "", "-lead"])
def test_lake_id_must_be_a_plain_slug(tmp_path: Path, bad: str) -> None:
    with pytest.raises(ConfigError) as err:
        load_lake(write(tmp_path, {**LAKE, "id": bad}))
    assert "id (line 1): lake id" in problems(err)
    assert "plain slug" in problems(err)


def test_unknown_time_zone(tmp_path: Path) -> None:
    with pytest.raises(ConfigError) as err:
        load_lake(write(tmp_path, {**LAKE, "timezone": "Europe/Atlantis"}))
    assert "timezone (line 3): unknown time zone 'Europe/Atlantis'" in problems(err)
    with pytest.raises(ConfigError) as err:
        load_lake(write(tmp_path, {**LAKE, "timezone": "Europe/Berln"}))
    assert "did you mean 'Europe/Berlin'" in problems(err)


def test_unknown_time_zone_of_the_weather(tmp_path: Path) -> None:
    sources = {"weather": {"paths": ["x.nc"], "time_zone": "Mars/Olympus"}}
    with pytest.raises(ConfigError) as err:
        load_project(write(tmp_path, LAKE, sources))
    assert "weather.time_zone" in problems(err) and "Mars/Olympus" in problems(err)


def test_env_variable_unset_without_default(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("LAKEFEED_TEST_DATA", raising=False)
    lake = {**LAKE, "lake": {"path": "${LAKEFEED_TEST_DATA}/lake.gpkg"}}
    with pytest.raises(ConfigError) as err:
        load_lake(write(tmp_path, lake))
    assert "lake.path: environment variable 'LAKEFEED_TEST_DATA' is not set" in problems(err)


def test_env_variable_default_and_value(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("LAKEFEED_TEST_DATA", raising=False)
    lake = {**LAKE, "lake": {"path": "${LAKEFEED_TEST_DATA:-/data}/lake.gpkg"}}
    assert load_lake(write(tmp_path, lake)).lake.path == Path("/data/lake.gpkg")
    monkeypatch.setenv("LAKEFEED_TEST_DATA", "/srv/lakes")
    assert load_lake(write(tmp_path, lake)).lake.path == Path("/srv/lakes/lake.gpkg")


def test_all_problems_at_once_across_both_files(tmp_path: Path) -> None:
    lake = {**LAKE, "id": "a b", "timezone": "Nowhere/Else", "zonez": {}}
    sources = {"weather": {"paths": ["x.nc"], "variabels": {}}}
    with pytest.raises(ConfigError) as err:
        load_project(write(tmp_path, lake, sources))
    text = problems(err)
    assert len(err.value.problems) == 4
    for part in ("id (line", "timezone (line", "zonez", "did you mean 'zones'?", "weather.variabels", "sources.yaml"):
        assert part in text


def test_duplicate_keys_are_rejected(tmp_path: Path) -> None:
    text = yaml.safe_dump(LAKE, sort_keys=False) + "timezone: UTC\n"
    with pytest.raises(ConfigError) as err:
        load_lake(write(tmp_path, text))
    assert "timezone (line" in problems(err) and "duplicate key; it was already given on line 3" in problems(err)


def test_wrong_type_names_key_and_value(tmp_path: Path) -> None:
    lake = {**LAKE, "sensors": {"kite": {"pixel_size_m": -5}}}
    with pytest.raises(ConfigError) as err:
        load_lake(write(tmp_path, lake))
    assert "sensors.kite.pixel_size_m (line" in problems(err) and "(got -5)" in problems(err)


def test_empty_and_non_mapping_files(tmp_path: Path) -> None:
    with pytest.raises(ConfigError, match="is empty"):
        load_lake(write(tmp_path, ""))
    with pytest.raises(ConfigError, match="top level must be a mapping"):
        load_lake(write(tmp_path, "- a\n- b\n"))


def test_folder_finds_lake_files_and_skips_the_sources_file(tmp_path: Path) -> None:
    path = write(tmp_path)
    (path.parent / "lake-typo.yaml").write_text(yaml.safe_dump({**LAKE, "idd": "x"}))
    found = find_lake_files([path.parent])
    assert [f.name for f in found] == ["lake-mini.yaml", "lake-typo.yaml"]
    with pytest.raises(ConfigError) as err:
        load_projects([path.parent])
    assert "idd" in problems(err)


def test_duplicate_lake_ids_across_files(tmp_path: Path) -> None:
    path = write(tmp_path)
    (path.parent / "lake-copy.yaml").write_text(yaml.safe_dump(LAKE))
    with pytest.raises(ConfigError, match="also used by"):
        load_projects([path.parent])


def test_folder_skips_other_yaml_but_keeps_broken_lake_files(tmp_path: Path) -> None:
    path = write(tmp_path)
    (path.parent / "deploy.yaml").write_text(yaml.safe_dump({"name": "monthly", "deployments": []}))
    (path.parent / "notes.yaml").write_text("a: [unclosed\n")
    (path.parent / "lake-broken.yaml").write_text("id: [unclosed\n")
    (path.parent / "reservoir.yml").write_text(yaml.safe_dump({**LAKE, "id": "res"}))
    found = [f.name for f in find_lake_files([path.parent])]
    assert found == ["lake-broken.yaml", "lake-mini.yaml", "reservoir.yml"]


_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False) | st.text(max_size=12),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=8), inner, max_size=3),
    max_leaves=8,
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(extra=st.dictionaries(st.sampled_from([*LAKE, "zones", "sensors", "features", "junk"]), _values, max_size=4))
def test_any_content_gives_a_model_or_a_config_error(tmp_path: Path, extra: dict) -> None:
    """Property: whatever the YAML holds, the loader returns a model or raises ConfigError (never a crash)."""
    try:
        load_lake(write(tmp_path, {**LAKE, **extra}))
    except ConfigError as err:
        assert err.problems or str(err)


@given(st.text(max_size=20))
def test_slug_rule(text: str) -> None:
    """Property: an id is accepted exactly when it is a plain slug (no '/', '.', spaces, upper case)."""
    from pydantic import ValidationError

    ok = bool(re.fullmatch(r"[a-z0-9][a-z0-9_-]{0,62}", text))
    try:
        LakeConfig.model_validate({**LAKE, "id": text})
        accepted = True
    except ValidationError:
        accepted = False
    assert accepted == ok


def test_values_without_meaning_are_all_reported_at_once(tmp_path: Path) -> None:
    """Reversed range, a zero window, a zero forecast lead, a quality bit beyond 64 bits, a lead in two
    forecast lead groups: one error listing each with its file and key path."""
    lake = {
        **LAKE,
        "sensors": {"kite": {"pixel_size_m": 20, "reference": True, "bad_quality_bits": [0, 70]}},
        "target": {"valid_range": [1000, 0.01]},
        "features": {"windows": [0, 7], "forecast_leads": [0, 3], "leads": [-1]},
    }
    sources = {**SOURCES, "forecast": {"paths": ["../f/*.nc"], "lead_groups": [[1, 2], [2, 3]]}}
    with pytest.raises(ConfigError) as err:
        load_project(write(tmp_path, lake, sources))
    found = err.value.problems
    lake_file = str(tmp_path / "config" / "lake-mini.yaml")
    expected = {
        "sensors.kite.bad_quality_bits": "quality bits are numbered 0 (lowest) to 63; got [70]",
        "target.valid_range": "got [1000.0, 0.01] (reversed: every value would be rejected; swap them)",
        "features.windows": "window lengths must be positive whole days; got [0]",
        "features.forecast_leads": "forecast lead times must be >= 1 day",
        "features.leads": "lead times must be >= 0 days (0: the target day itself); got [-1]",
    }
    for key, text in expected.items():
        assert any(lake_file in p and key in p and text in p for p in found), (key, found)
    # the sources file is read only once the lake file is valid: its problem comes on its own
    with pytest.raises(ConfigError) as err:
        load_project(write(tmp_path, LAKE, sources))
    assert any("forecast.lead_groups" in p and "lead 2 is in groups 0 and 1" in p for p in err.value.problems)
