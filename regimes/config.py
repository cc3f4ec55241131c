"""The TOML job description: schema, defaults and validation.

This module is the only place where defaults live. A config is validated
completely before any data is read; every problem is reported as a
:class:`~regimes.errors.UserError` naming the key path, the value and what is
allowed. Config files are data: nothing in them is evaluated.
"""

from __future__ import annotations

import difflib
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace
from typing import Any, Callable

from .errors import UserError

_DATE = re.compile(r"^\d{4}-(0[1-9]|1[0-2])-(0[1-9]|[12]\d|3[01])$")


@dataclass(frozen=True)
class Key:
    """One config key: its default, a checker and a line of documentation."""

    default: Any
    check: Callable[[str, Any], Any]
    doc: str
    example: Any = None
    required: bool = False


# --------------------------------------------------------------------------
# value checkers: each takes (key path, value) and returns the clean value
# --------------------------------------------------------------------------


def _fail(path: str, value: Any, expected: str) -> UserError:
    return UserError(f"config key '{path}' = {value!r}: expected {expected}; fix it in the config file")


def _boolean(path, value):
    if not isinstance(value, bool):
        raise _fail(path, value, "true or false")
    return value


def _integer(low=None, high=None):
    def check(path, value):
        ok = isinstance(value, int) and not isinstance(value, bool)
        if not ok or (low is not None and value < low) or (high is not None and value > high):
            span = f" from {low}" if low is not None else ""
            span += f" to {high}" if high is not None else (" upward" if low is not None else "")
            raise _fail(path, value, f"a whole number{span}")
        return value

    return check


def _fraction(path, value):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value <= 1:
        raise _fail(path, value, "a number in (0, 1]")
    return float(value)


def _choice(*allowed):
    def check(path, value):
        if value not in allowed:
            raise _fail(path, value, "one of " + ", ".join(repr(a) for a in allowed))
        return value

    return check


def _text(path, value):
    if not isinstance(value, str) or not value.strip():
        raise _fail(path, value, "a non-empty string")
    return value


def _optional(check):
    def wrapped(path, value):
        return None if value is None else check(path, value)

    return wrapped


def _paths(path, value):
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not value or not all(isinstance(v, str) and v for v in value):
        raise _fail(path, value, "a file name, glob pattern, or a list of them")
    return value


def _pair_of_numbers(low, high):
    def check(path, value):
        if (
            not isinstance(value, list)
            or len(value) != 2
            or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
            or not all(low <= v <= high for v in value)
        ):
            raise _fail(path, value, f"two numbers between {low} and {high}, e.g. [{low}, {high}]")
        return [float(v) for v in value]

    return check


def _number(path, value):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise _fail(path, value, "a number")
    return float(value)


def _period(path, value):
    if (
        not isinstance(value, list)
        or len(value) != 2
        or not all(isinstance(v, str) and _DATE.match(v) for v in value)
        or value[0] > value[1]
    ):
        raise _fail(path, value, 'two dates "YYYY-MM-DD", the first not after the second')
    return list(value)


def _months(path, value):
    if (
        not isinstance(value, list)
        or not value
        or not all(isinstance(m, int) and not isinstance(m, bool) and 1 <= m <= 12 for m in value)
        or len(set(value)) != len(value)
    ):
        raise _fail(path, value, "a list of distinct month numbers 1..12, e.g. [12, 1, 2]")
    return list(value)


def _k(path, value):
    if value == "auto":
        return value
    try:
        return _integer(1, 50)(path, value)
    except UserError:
        raise _fail(path, value, 'a whole number from 1 to 50, or "auto" (chosen by the [scan] rule)') from None


def _k_range(path, value):
    if (
        not isinstance(value, list)
        or len(value) != 2
        or not all(isinstance(v, int) and not isinstance(v, bool) and 2 <= v <= 50 for v in value)
        or value[0] > value[1]
    ):
        raise _fail(path, value, "two whole numbers from 2 to 50, the first not larger, e.g. [2, 8]")
    return list(value)


def _open_fraction(path, value):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0 < value < 1:
        raise _fail(path, value, "a number strictly between 0 and 1, e.g. 0.9")
    return float(value)


def _correlation(path, value):
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not -1 <= value <= 1:
        raise _fail(path, value, "a correlation between -1 and 1, e.g. 0.3")
    return float(value)


def _names(path, value):
    if not isinstance(value, list) or not all(isinstance(v, str) and v.strip() for v in value):
        raise _fail(path, value, "a list of non-empty strings")
    if len(set(value)) != len(value):
        raise _fail(path, value, "distinct names")
    return list(value)


# --------------------------------------------------------------------------
# the schema
# --------------------------------------------------------------------------

FIGURE_FORMATS = ("png", "pdf", "svg")
PROJECTIONS = ("auto", "polar-stereographic", "lambert-conformal", "albers-equal-area", "plate-carree")
COLORMAPS = ("RdBu_r", "PuOr_r", "BrBG_r", "RdYlBu_r")

SCHEMA: dict[str, dict[str, Key]] = {
    "data": {
        "paths": Key(None, _paths, "NetCDF files or glob patterns, relative to this config file", ["data/*.nc"], required=True),
        "variable": Key(None, _text, "name of the variable to classify", "psl", required=True),
        "lat": Key(None, _optional(_pair_of_numbers(-90, 90)), "latitude range [south, north] in degrees; either order", [20.0, 80.0]),
        "lon": Key(
            None,
            _optional(_pair_of_numbers(-180, 360)),
            "longitude range [west, east] in degrees east, in either convention; west > east crosses the 180 meridian",
            [-90.0, 30.0],
        ),
        "level": Key(None, _optional(_number), "vertical level to select, in the file's vertical units (e.g. 500 for hPa)", 500),
        "period": Key(None, _optional(_period), 'first and last day ["YYYY-MM-DD", "YYYY-MM-DD"]', ["1981-01-01", "2010-12-31"]),
        "months": Key(None, _optional(_months), "months of the season; a season may span the new year, e.g. [12, 1, 2]; each season is labelled by the year it starts in", [12, 1, 2]),
        "drop_incomplete_days": Key(False, _boolean, "drop days on which some grid points are missing (otherwise such days are an error)"),
        "chunk_days": Key(365, _integer(1), "days per dask chunk when reading; results do not depend on it"),
    },
    "anomalies": {
        "climatology": Key(
            "auto",
            _choice("auto", "daily", "monthly", "none"),
            "daily: day-of-year mean smoothed by harmonics; monthly: calendar-month mean; auto: daily for daily data, monthly for monthly data; none: use the field as it is",
        ),
        "harmonics": Key(3, _integer(1, 60), "harmonics of the annual cycle kept in a daily climatology"),
        "base_period": Key(None, _optional(_period), "period the climatology is computed over (default: all selected years)", ["1981-01-01", "2010-12-31"]),
        "detrend": Key(False, _boolean, "remove a least-squares linear trend from the anomalies at each grid point"),
        "running_mean_days": Key(0, _integer(0), "centred running mean over this many days (0 or 1: none)"),
    },
    "eof": {
        "weighting": Key("coslat", _choice("coslat", "cell-area", "none"), "coslat: sqrt(cos lat); cell-area: sqrt of cell area from bounds or a cell-area variable; none"),
        "modes": Key(10, _integer(1), "number of EOF modes kept (ignored when variance_fraction is set)"),
        "variance_fraction": Key(None, _optional(_fraction), "keep the fewest modes that explain this fraction of variance", 0.8),
        "solver": Key("auto", _choice("auto", "exact", "randomized"), "exact eigen-decomposition, randomized SVD, or auto (by matrix size)"),
    },
    "regimes": {
        "method": Key("kmeans", _choice("kmeans", "gaussian-mixture"), "clustering method in PC space"),
        "k": Key(4, _k, 'number of regimes, or "auto" to choose it with the rule of [scan]'),
        "restarts": Key(100, _integer(1), "number of seeded restarts; the best one is kept"),
        "seed": Key(1, _integer(0), "seed of the one random generator of the job"),
        "names": Key(None, _optional(_names), "names of the regimes 1..k (most frequent first)", ["first", "second", "third", "fourth"]),
        "min_duration_days": Key(0, _integer(0), "episodes shorter than this are not counted in duration statistics (0: all)"),
        "max_iterations": Key(300, _integer(1), "iteration limit of each restart"),
        "unassigned_below": Key(
            None,
            _optional(_correlation),
            "a day whose pattern correlation with its nearest regime centroid (uncentred, in the area-weighted space of the "
            "retained EOFs) is below this gets label 0, 'unassigned', a state of its own in the statistics (unset: every day gets a regime)",
            0.3,
        ),
    },
    "assign": {
        "climatology": Key(
            "model",
            _choice("model", "own"),
            "regimes assign only: anomalies from the model's reference climatology (model) or from a climatology of the same kind fitted on the new data (own)",
        ),
    },
    "scan": {
        "k_range": Key([2, 8], _k_range, "smallest and largest k tried by 'regimes scan' and by regimes.k = \"auto\""),
        "surrogates": Key(100, _integer(0), "red-noise (AR(1)) surrogates for the significance of the classifiability"),
        "restarts": Key(50, _integer(2), "k-means++ restarts per fit in the scan (the classifiability compares them)"),
        "confidence": Key(0.9, _open_fraction, "confidence level of the red-noise test"),
    },
    "output": {
        "dir": Key("out", _text, "output folder, relative to this config file"),
    },
    "figures": {
        "draw": Key(True, _boolean, "draw the figures and the HTML report into the output folder after each run"),
        "format": Key("png", _choice(*FIGURE_FORMATS), "file format of the figures (the report embeds PNG copies)"),
        "dpi": Key(150, _integer(50, 600), "resolution of PNG figures (and of the report's images), dots per inch"),
        "projection": Key(
            "auto",
            _choice(*PROJECTIONS),
            "map projection; auto: polar stereographic for polar caps, Lambert conformal for mid-latitude sectors, plate carree for tropical bands",
        ),
        "colormap": Key("RdBu_r", _choice(*COLORMAPS), "diverging colour map of the maps (ColorBrewer schemes, colour-blind safe)"),
        "levels": Key(16, _integer(4, 40), "about how many filled contour intervals span the shared colour scale"),
        "eof_modes": Key(4, _integer(1, 20), "number of leading EOF patterns drawn"),
    },
}


def _suggest(word: str, options) -> str:
    close = difflib.get_close_matches(word, list(options), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else f"; known keys: {', '.join(options)}"


def validate(raw: dict, base_dir: Path | str = ".") -> SimpleNamespace:
    """Check a parsed config against the schema and fill in defaults.

    Parameters
    ----------
    raw : dict
        The parsed TOML document.
    base_dir : path
        Folder that relative paths in the config refer to (the config's folder).

    Returns
    -------
    types.SimpleNamespace
        One attribute per section, each a SimpleNamespace of keys. ``data.paths``
        and ``output.dir`` are absolute.

    Raises
    ------
    UserError
        On an unknown section or key (with the nearest known name), a missing
        required key, or a value outside what is allowed.
    """
    base_dir = Path(base_dir)
    sections = {}
    for name in raw:
        if name not in SCHEMA:
            raise UserError(f"config section '[{name}]' is unknown{_suggest(name, SCHEMA)}")
        if not isinstance(raw[name], dict):
            raise UserError(f"config entry '{name}' must be a section [{name}]")
    for section in SCHEMA:
        sections[section] = validate_section(section, raw.get(section, {}))
    cfg = SimpleNamespace(**sections)
    _check_together(cfg)
    cfg.data.paths = [str((base_dir / p)) if not Path(p).is_absolute() else p for p in cfg.data.paths]
    cfg.output.dir = str((base_dir / cfg.output.dir).resolve())
    return cfg


def validate_section(section: str, given: dict) -> SimpleNamespace:
    """Check one section's keys against the schema and fill in its defaults.

    Raises
    ------
    UserError
        On an unknown key (with the nearest known one), a missing required key or a bad value.
    """
    keys = SCHEMA[section]
    for key in given:
        if key not in keys:
            raise UserError(f"config key '{section}.{key}' is unknown{_suggest(key, keys)}")
    values = {}
    for key, spec in keys.items():
        if key in given:
            values[key] = spec.check(f"{section}.{key}", given[key])
        elif spec.required:
            raise UserError(f"config key '{section}.{key}' is required ({spec.doc}); add it to [{section}]")
        else:
            values[key] = spec.default
    return SimpleNamespace(**values)


def figure_settings(config_text: str | None, overrides: dict | None = None) -> SimpleNamespace:
    """The ``[figures]`` section of a recorded config text, with ``overrides`` (None values ignored) on top.

    Used to redraw a finished run: the text is the config recorded in its
    output files (None when the run had no config file: defaults).
    """
    try:
        raw = tomllib.loads(config_text) if config_text else {}
    except tomllib.TOMLDecodeError as err:
        raise UserError(f"the config recorded in the output files is not valid TOML ({err}); rerun the job") from None
    given = {**raw.get("figures", {}), **{k: v for k, v in (overrides or {}).items() if v is not None}}
    return validate_section("figures", given)


def _check_together(cfg: SimpleNamespace) -> None:
    """Rules that involve more than one key."""
    names = cfg.regimes.names
    if names is not None and cfg.regimes.k == "auto":
        raise UserError("config key 'regimes.names' is set but regimes.k = \"auto\"; give a fixed k with the names, or remove the names")
    if names is not None and len(names) != cfg.regimes.k:
        raise UserError(
            f"config key 'regimes.names' has {len(names)} names but regimes.k = {cfg.regimes.k}; give one name per regime"
        )
    days = cfg.anomalies.running_mean_days
    if days > 1 and days % 2 == 0:
        raise UserError(f"config key 'anomalies.running_mean_days' = {days}: a centred running mean needs an odd number of days; use {days + 1} or {days - 1}")
    if cfg.anomalies.climatology == "none" and cfg.anomalies.base_period is not None:
        raise UserError("config key 'anomalies.base_period' is set but anomalies.climatology = 'none'; remove one of them")


def load(path: str | Path) -> tuple[SimpleNamespace, str]:
    """Read and validate a TOML config file.

    Returns
    -------
    config : types.SimpleNamespace
        Validated config (see :func:`validate`).
    text : str
        The file's text, kept for provenance.
    """
    raw, text = parse(path)
    return validate(raw, Path(path).resolve().parent), text


def parse(path: str | Path) -> tuple[dict, str]:
    """Read a TOML config file without validating it: the parsed document and the file's text."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise UserError(f"config file '{path}' not found; check the path (or write one with 'regimes init')") from None
    except (OSError, UnicodeDecodeError) as err:
        raise UserError(f"config file '{path}' cannot be read ({err}); check the file") from None
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise UserError(f"config file '{path}' is not valid TOML: {err}; fix the file") from None
    return raw, text


MODEL_FIXED = {
    "data": ("lat", "lon", "level", "months"),
    "anomalies": ("climatology", "harmonics", "detrend", "running_mean_days"),
    "eof": ("weighting",),
    "regimes": ("method", "k", "names"),
}
"""Keys a saved model fixes when it classifies other data (its selection, anomalies, weights and regimes)."""

MODEL_DEFAULTS = {"regimes": ("min_duration_days", "unassigned_below")}
"""Keys taken from the saved model unless the config sets them."""


def for_model(
    settings: dict, paths: list[str], path: str | Path | None = None, own_climatology: bool = False
) -> tuple[SimpleNamespace, str | None]:
    """The config of ``regimes assign``: a model's settings with the new data and an optional config file.

    Parameters
    ----------
    settings : dict
        :attr:`regimes.model.RegimeModel.settings`.
    paths : list of str
        Data files or glob patterns (relative to the working folder); they
        replace ``data.paths`` of the config file.
    path : path, optional
        A config file; its keys in :data:`MODEL_FIXED` must agree with the
        model, keys only used in fitting (``eof.modes``, ``regimes.restarts``
        ...) are ignored. ``data.variable`` defaults to the model's variable.
    own_climatology : bool
        Sets ``assign.climatology = "own"``.

    Returns
    -------
    config : types.SimpleNamespace
        Validated config carrying the model's values of :data:`MODEL_FIXED`.
    text : str or None
        The config file's text.

    Raises
    ------
    UserError
        If the config file is invalid or sets a fixed key to another value than the model's.
    """
    raw, text = parse(path) if path is not None else ({}, None)
    base = Path(path).resolve().parent if path is not None else Path.cwd()
    raw = dict(raw)
    if isinstance(raw.get("data", {}), dict):  # else validate() reports the entry
        raw["data"] = {"variable": settings["variable"], **raw.get("data", {}), "paths": [str(Path(p).absolute()) for p in paths]}
    if own_climatology and isinstance(raw.get("assign", {}), dict):
        raw["assign"] = {**raw.get("assign", {}), "climatology": "own"}
    cfg = validate(raw, base)
    for section, keys in MODEL_FIXED.items():
        for key in keys:
            model_value = settings[key]
            if key in raw.get(section, {}):
                value = getattr(getattr(cfg, section), key)
                if value != model_value and not (key == "climatology" and value == "auto"):
                    raise UserError(
                        f"config key '{section}.{key}' = {value!r} differs from the model's {model_value!r}; "
                        "the model fixes it: remove the key from the config or fit a new model"
                    )
            setattr(getattr(cfg, section), key, model_value)
    for section, keys in MODEL_DEFAULTS.items():
        for key in keys:
            if key not in raw.get(section, {}) and key in settings:
                setattr(getattr(cfg, section), key, settings[key])
    return cfg, text


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    return repr(value)


def reference_text(overrides: dict | None = None) -> str:
    """A commented TOML config listing every key with its default.

    Keys without a default are shown commented out with an example value,
    unless ``overrides`` (``{"section": {"key": value}}``) gives a value.
    """
    overrides = overrides or {}
    lines = ["# regimes job description (TOML). Paths are relative to this file.", ""]
    for section, keys in SCHEMA.items():
        lines.append(f"[{section}]")
        for key, spec in keys.items():
            lines.append(f"# {spec.doc}" + (" (required)" if spec.required else ""))
            value = overrides.get(section, {}).get(key, spec.default)
            if value is None:
                lines.append(f"# {key} = {_toml_value(spec.example)}")
            else:
                lines.append(f"{key} = {_toml_value(value)}")
        lines.append("")
    return "\n".join(lines)
