"""Figures of an assignment, of an ensemble and of the 'unassigned' state (planted-truth data; images checked with PIL)."""

from __future__ import annotations

import json

import numpy as np
import pytest
import xarray as xr
from PIL import Image

from regimes import cli, config, figures, finished, pipeline, synthetic
from regimes.errors import UserError

LAT = np.arange(30.0, 71.0, 10.0)  # coarse, so that drawing is quick
LON = np.arange(-40.0, 21.0, 10.0)
JOB = """
[data]
paths = ["psl.nc"]
variable = "psl"
months = [12, 1, 2]
[eof]
modes = 4
[regimes]
k = 3
restarts = 3
seed = 3
{extra}
[figures]
dpi = 60
draw = {draw}
[output]
dir = "{out}"
"""
RESULT_FIGURES = {"regime_maps", "monthly_frequency", "yearly_frequency", "transitions", "durations", "timeline"}


def run_job(folder, out, extra="", draw=True):
    path = folder / f"{out}.toml"
    path.write_text(JOB.format(out=folder / out, extra=extra, draw=str(draw).lower()))
    cfg, text = config.load(path)
    return pipeline.run(cfg, text)


def assign(*args) -> None:
    assert cli.main(["--quiet", "assign", *map(str, args)]) == 0


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """Four winters of three planted regimes, a run on them (with its model) and an assignment of the same data."""
    folder = tmp_path_factory.mktemp("assignfig")
    data, _ = synthetic.planted_regimes(years=4, lat=LAT, lon=LON, k=3, seed=4)
    synthetic.write_netcdf(data, folder / "psl.nc")
    fit = run_job(folder, "fit", draw=False)  # the run's figures are tested in test_figures.py
    assign(fit / "model.nc", folder / "psl.nc", "--output", folder / "assigned")
    return folder, data, fit, folder / "assigned"


def image_ok(path) -> None:
    """A valid PNG (PIL checks the signature and chunks) that is not blank (a blank page is one colour)."""
    with Image.open(path) as image:
        image.verify()
    with Image.open(path) as image:
        colours = image.convert("RGB").getcolors(1 << 24)  # PIL's count of distinct colours
    assert len(colours) > 16, path


def panel_count(found, stem) -> int:
    spec = next(s for s in figures.CATALOGUE if s.stem == stem)
    return sum(ax.get_label() == "panel" for ax in spec.draw(found, config.figure_settings(None, {"dpi": 60})).axes)


def legend_texts(fig) -> set[str]:
    return {t.get_text() for ax in fig.axes if ax.get_legend() for t in ax.get_legend().get_texts()}


def test_an_assignment_draws_every_figure_of_its_results_and_a_report(planted):
    _, _, _, out = planted
    found = finished.open_folder(out)
    assert found.kind == "assignment" and found.eofs is None and found.model is None
    assert {s.stem for s in figures.available(found)} == RESULT_FIGURES  # no EOF maps: an assignment has no eofs.nc
    for stem in RESULT_FIGURES:
        image_ok(out / f"{stem}.png")
    assert not (out / "eof_maps.png").exists()
    k = found.composites.sizes["regime"]
    assert k == 3
    wanted = {"regime_maps": k, "monthly_frequency": 1, "yearly_frequency": k, "transitions": 2, "durations": k, "timeline": 1}
    for stem, n in wanted.items():
        assert panel_count(found, stem) == n, stem
    page = (out / "report.html").read_text()
    assert "Assigned regimes of psl" in page and str(found.labels.attrs["model_file"]) in page
    assert page.count("data:image/png;base64,") == len(RESULT_FIGURES)


def test_assignment_settings_come_from_its_own_files_not_the_model(planted, tmp_path):
    folder, _, fit, out = planted
    moved = tmp_path / "alone"
    moved.mkdir()
    for name in finished.ASSIGN_FILES:
        (moved / name).write_bytes((out / name).read_bytes())
    # the model file named in the attributes is not where this folder could find it: nothing is read from it
    assert not (moved / "model.nc").exists()
    found = finished.open_folder(moved)
    with xr.open_dataset(fit / "model.nc") as model:
        fitted = json.loads(model.attrs["settings"])
    assert {key: found.settings[key] for key in ("months", "k", "method", "weighting")} == {
        key: fitted[key] for key in ("months", "k", "method", "weighting")
    }
    assert cli.main(["--quiet", "plot", str(moved), "--dpi", "50"]) == 0
    for stem in RESULT_FIGURES:
        image_ok(moved / f"{stem}.png")
    assert (moved / "report.html").is_file()


def test_a_folder_with_only_some_files_is_still_refused_in_one_line(planted, tmp_path):
    _, _, _, out = planted
    (tmp_path / "labels.nc").write_bytes((out / "labels.nc").read_bytes())
    with pytest.raises(UserError) as err:
        finished.open_folder(tmp_path)
    assert "\n" not in str(err.value) and "missing composites.nc" in str(err.value)


def test_an_ensemble_assignment_draws_with_the_state_of_most_members(planted, tmp_path):
    folder, data, fit, _ = planted
    winter = data["psl"].sel(time=slice("1982-12-01", "1983-02-28"))
    rng = np.random.default_rng(7)
    members = [winter + rng.normal(0.0, 300.0, winter.shape) for _ in range(3)]
    ensemble = xr.concat(members, "r").assign_coords(r=("r", np.arange(1, 4, dtype=np.int32), {"standard_name": "realization", "units": "1"}))
    synthetic.write_netcdf(xr.Dataset({"psl": ensemble.transpose("r", "time", "lat", "lon")}, attrs=data.attrs), tmp_path / "ens.nc")
    assign(fit / "model.nc", tmp_path / "ens.nc", "--output", tmp_path / "out")
    found = finished.open_folder(tmp_path / "out")
    assert found.labels["label"].dims == ("member", "time")
    for stem in RESULT_FIGURES:
        image_ok(tmp_path / "out" / f"{stem}.png")
    # the state of most members, against a count by hand with numpy's bincount (reference)
    label = found.labels["label"].values
    by_hand = np.array([np.bincount(day, minlength=4).argmax() for day in label.T])
    np.testing.assert_array_equal(figures.most_members(found.labels["label"], np.arange(1, 4)), by_hand)
    fig = figures.timeline(found, config.figure_settings(None))
    assert "state of most members" in fig.axes[0].get_title() and "3 members" in fig.axes[0].get_title()


@pytest.fixture(scope="module")
def partial(planted):
    """A run and an assignment with the 'unassigned' state (label 0)."""
    folder, _, _, _ = planted
    run = run_job(folder, "partial", extra="unassigned_below = 0.8")
    assign(run / "model.nc", folder / "psl.nc", "--output", folder / "partial_assigned")
    return run, folder / "partial_assigned"


@pytest.mark.parametrize("which", [0, 1], ids=["run", "assignment"])
def test_the_unassigned_state_is_drawn_as_a_state_of_its_own(partial, which):
    out = partial[which]
    found = finished.open_folder(out)
    assert (found.labels["label"].values == 0).any()  # the threshold does leave days unassigned
    assert list(found.statistics["regime"].values) == [0, 1, 2, 3]
    for spec in figures.available(found):
        image_ok(out / f"{spec.stem}.png")
    k = found.composites.sizes["regime"]
    style = config.figure_settings(None)
    assert panel_count(found, "regime_maps") == k  # no map panel for unassigned days
    assert panel_count(found, "yearly_frequency") == k + 1 and panel_count(found, "durations") == k + 1
    for draw in (figures.monthly_frequency, figures.timeline):
        assert "Unassigned" in legend_texts(draw(found, style))
    fig = figures.transitions(found, style)
    ticks = [t.get_text() for t in fig.axes[0].get_xticklabels()]
    assert ticks == ["0", "1", "2", "3"] and "unassigned" in fig.axes[0].get_xlabel()
    # every regime keeps the colour it has without the unassigned state; unassigned is grey
    assert figures.state_colours([0, 1, 2, 3]) == [figures.UNASSIGNED_COLOUR, *figures.regime_colours(3)]
    assert "Unassigned" in (out / "report.html").read_text() or "unassigned" in (out / "report.html").read_text()
