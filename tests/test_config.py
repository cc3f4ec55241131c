"""Tests of regimes.config: schema, defaults, validation messages, reference text."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import pytest

from regimes import config
from regimes.errors import UserError

MINIMAL = {"data": {"paths": "in.nc", "variable": "psl"}}


def with_keys(**sections):
    """MINIMAL plus extra keys, given as section=dict."""
    raw = {"data": dict(MINIMAL["data"])}
    for name, keys in sections.items():
        raw.setdefault(name, {}).update(keys)
    return raw


def write_config(folder: Path, text: str) -> Path:
    path = folder / "job.toml"
    path.write_text(text, encoding="utf-8")
    return path


# --------------------------------------------------------------------------
# defaults
# --------------------------------------------------------------------------


def test_defaults_are_filled_for_every_key(tmp_path):
    cfg = config.validate(MINIMAL, tmp_path)
    for section, keys in config.SCHEMA.items():
        ns = getattr(cfg, section)
        for key, spec in keys.items():
            assert hasattr(ns, key), f"{section}.{key} missing"
            if key not in ("paths", "variable", "dir"):
                assert getattr(ns, key) == spec.default, f"{section}.{key}"
    # a few defaults spelled out, as documented in the schema docs
    assert cfg.anomalies.climatology == "auto"
    assert cfg.regimes.k == 4
    assert cfg.eof.weighting == "coslat"
    assert cfg.data.variable == "psl"


def test_string_path_becomes_a_list(tmp_path):
    cfg = config.validate(MINIMAL, tmp_path)
    assert isinstance(cfg.data.paths, list) and len(cfg.data.paths) == 1


# --------------------------------------------------------------------------
# unknown keys and sections
# --------------------------------------------------------------------------


def test_unknown_key_names_path_and_suggests_nearest(tmp_path):
    with pytest.raises(UserError) as err:
        config.validate(with_keys(regimes={"restart": 5}), tmp_path)
    message = str(err.value)
    assert "regimes.restart" in message
    assert "restarts" in message


def test_unknown_key_in_data_section_suggests(tmp_path):
    with pytest.raises(UserError) as err:
        config.validate(with_keys(data={"variabel": "psl"}), tmp_path)
    assert "data.variabel" in str(err.value)
    assert "'variable'" in str(err.value)


def test_unknown_section(tmp_path):
    raw = with_keys()
    raw["regime"] = {"k": 3}
    with pytest.raises(UserError) as err:
        config.validate(raw, tmp_path)
    message = str(err.value)
    assert "regime" in message and "unknown" in message
    assert "'regimes'" in message  # the nearest section is suggested


def test_unrelated_unknown_section_lists_known(tmp_path):
    raw = with_keys()
    raw["zzzz"] = {}
    with pytest.raises(UserError) as err:
        config.validate(raw, tmp_path)
    assert "zzzz" in str(err.value)
    for section in config.SCHEMA:
        assert section in str(err.value)


def test_missing_required_key(tmp_path):
    with pytest.raises(UserError) as err:
        config.validate({"data": {"paths": "in.nc"}}, tmp_path)
    assert "data.variable" in str(err.value)


# --------------------------------------------------------------------------
# bad values
# --------------------------------------------------------------------------


@pytest.mark.parametrize(
    "section, key, value",
    [
        ("regimes", "k", 0),
        ("regimes", "k", True),
        ("regimes", "k", "automatic"),
        ("scan", "k_range", [5, 2]),
        ("scan", "k_range", [1, 4]),
        ("scan", "restarts", 1),
        ("scan", "confidence", 1.0),
        ("data", "months", [13]),
        ("data", "months", [0]),
        ("data", "months", [1, 1]),
        ("data", "lat", [100, 0]),
        ("data", "lat", [10]),
        ("data", "lon", [0, 400]),
        ("data", "period", ["2000-01-01", "1990-12-31"]),
        ("data", "period", ["2000-01", "2001-01"]),
        # no calendar has a 13th month or a 32nd day (CF conventions 1.8 sec. 4.4.1 calendars)
        ("data", "period", ["1981-13-01", "1982-03-31"]),
        ("data", "period", ["1981-01-32", "1982-03-31"]),
        ("anomalies", "base_period", ["1981-00-10", "1982-03-31"]),
        ("anomalies", "harmonics", 0),
        ("anomalies", "climatology", "weekly"),
        ("eof", "variance_fraction", 1.5),
        ("eof", "modes", 0),
        ("regimes", "method", "dbscan"),
        ("regimes", "restarts", 0),
        ("data", "drop_incomplete_days", "yes"),
    ],
    ids=lambda v: repr(v).replace(" ", ""),
)
def test_bad_value_names_the_key(tmp_path, section, key, value):
    with pytest.raises(UserError) as err:
        config.validate(with_keys(**{section: {key: value}}), tmp_path)
    assert f"{section}.{key}" in str(err.value)
    assert "\n" not in str(err.value)


def test_names_length_must_equal_k(tmp_path):
    with pytest.raises(UserError) as err:
        config.validate(with_keys(regimes={"k": 3, "names": ["a", "b"]}), tmp_path)
    assert "regimes.names" in str(err.value)


def test_k_auto_is_accepted_but_not_with_names(tmp_path):
    assert config.validate(with_keys(regimes={"k": "auto"}), tmp_path).regimes.k == "auto"
    with pytest.raises(UserError, match="regimes.names"):
        config.validate(with_keys(regimes={"k": "auto", "names": ["a", "b"]}), tmp_path)


def test_names_of_right_length_accepted(tmp_path):
    cfg = config.validate(with_keys(regimes={"k": 2, "names": ["a", "b"]}), tmp_path)
    assert cfg.regimes.names == ["a", "b"]


def test_good_values_pass_through(tmp_path):
    cfg = config.validate(
        with_keys(data={"lat": [80, 20], "lon": [160, -160], "months": [12, 1, 2], "period": ["1990-01-01", "1990-01-01"]}),
        tmp_path,
    )
    assert cfg.data.lat == [80.0, 20.0]
    assert cfg.data.lon == [160.0, -160.0]
    assert cfg.data.months == [12, 1, 2]
    assert cfg.data.period == ["1990-01-01", "1990-01-01"]


# --------------------------------------------------------------------------
# files: TOML errors and paths
# --------------------------------------------------------------------------


def test_invalid_toml_reports_line_and_column(tmp_path):
    path = write_config(tmp_path, '[data]\npaths = "in.nc"\nvariable = = "psl"\n')
    with pytest.raises(UserError) as err:
        config.load(path)
    message = str(err.value)
    assert str(path) in message
    # tomllib reports "(at line L, column C)" -- the Python standard library's TOML parser
    match = re.search(r"line (\d+), column (\d+)", message)
    assert match, message
    assert match.group(1) == "3"


def test_missing_config_file(tmp_path):
    with pytest.raises(UserError) as err:
        config.load(tmp_path / "nope.toml")
    assert "nope.toml" in str(err.value)


def test_relative_paths_resolve_against_config_folder(tmp_path, monkeypatch):
    folder = tmp_path / "jobs"
    folder.mkdir()
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    path = write_config(
        folder,
        '[data]\npaths = ["data/a.nc", "/abs/b.nc"]\nvariable = "psl"\n[output]\ndir = "../results"\n',
    )
    cfg, text = config.load(path)
    assert text == path.read_text(encoding="utf-8")
    assert Path(cfg.data.paths[0]).resolve() == (folder / "data" / "a.nc").resolve()
    assert cfg.data.paths[1] == "/abs/b.nc"
    assert Path(cfg.output.dir) == (tmp_path / "results").resolve()


def test_relative_path_given_as_relative_config_path(tmp_path, monkeypatch):
    folder = tmp_path / "jobs"
    folder.mkdir()
    write_config(folder, '[data]\npaths = "x.nc"\nvariable = "psl"\n')
    monkeypatch.chdir(tmp_path)
    cfg, _ = config.load("jobs/job.toml")
    assert Path(cfg.data.paths[0]).is_absolute()
    assert Path(cfg.data.paths[0]) == (folder / "x.nc").resolve()
    assert Path(cfg.output.dir) == (folder / "out").resolve()


# --------------------------------------------------------------------------
# reference text
# --------------------------------------------------------------------------


def test_reference_text_is_toml_with_every_key():
    text = config.reference_text()
    parsed = tomllib.loads(text)
    current = None
    seen: dict[str, set] = {s: set() for s in config.SCHEMA}
    for line in text.splitlines():
        head = re.fullmatch(r"\[(\w+)\]", line.strip())
        if head:
            current = head.group(1)
            continue
        key = re.fullmatch(r"#?\s*(\w+)\s*=.*", line.strip())
        if key and current in seen:
            seen[current].add(key.group(1))
    for section, keys in config.SCHEMA.items():
        assert section in parsed
        assert seen[section] == set(keys), section
        for key, spec in keys.items():
            if spec.default is not None:
                assert parsed[section][key] == spec.default, f"{section}.{key}"
            else:
                assert key not in parsed[section]


def test_reference_text_uncommented_validates(tmp_path):
    """Uncommenting every example line gives a valid config."""
    text = config.reference_text()
    lines = []
    for line in text.splitlines():
        m = re.fullmatch(r"#\s*(\w+\s*=.*)", line)
        lines.append(m.group(1) if m else line)
    raw = tomllib.loads("\n".join(lines))
    cfg = config.validate(raw, tmp_path)
    assert cfg.data.variable == config.SCHEMA["data"]["variable"].example


def test_reference_text_overrides():
    text = config.reference_text({"data": {"paths": ["x/*.nc"], "variable": "zg"}, "regimes": {"k": 6}})
    parsed = tomllib.loads(text)
    assert parsed["data"]["paths"] == ["x/*.nc"]
    assert parsed["data"]["variable"] == "zg"
    assert parsed["regimes"]["k"] == 6
