"""Figures of a finished run: valid, non-blank images with the expected panels, coastlines offline, map geometry."""

from __future__ import annotations

import io
import shutil
import socket

import cartopy
import matplotlib
import numpy as np
import pytest
import shapefile
import xarray as xr
from matplotlib.contour import ContourSet
from PIL import Image

from regimes import cli, coastline, config, figures, finished, maps, pipeline, report
from regimes.errors import UserError

STYLE = config.validate_section("figures", {"eof_modes": 3, "dpi": 80})


@pytest.fixture()
def offline(monkeypatch, tmp_path):
    """No network, and no cartopy data on disk: cartopy would have to download, and cannot."""
    def refuse(*args, **kwargs):
        raise OSError("network access is blocked in this test")

    monkeypatch.setattr(socket.socket, "connect", refuse)
    monkeypatch.setattr(socket, "create_connection", refuse)
    monkeypatch.setitem(cartopy.config, "data_dir", tmp_path / "no-cartopy-data")
    monkeypatch.setitem(cartopy.config, "pre_existing_data_dir", tmp_path / "no-cartopy-data-either")


def pixels(fig) -> np.ndarray:
    """The figure rendered with Agg, as an (h, w, 4) uint8 array."""
    buffer = io.BytesIO()
    with matplotlib.rc_context(figures.LOOK):
        fig.savefig(buffer, format="png", dpi=60)
    return np.asarray(Image.open(io.BytesIO(buffer.getvalue())).convert("RGBA"))


def panels(fig) -> list:
    return [ax for ax in fig.axes if ax.get_label() == "panel"]


def expected_panels(found: finished.Finished) -> dict[str, int]:
    """Panels per figure, from the result files: one per regime, per drawn EOF, per matrix, per diagnostic."""
    k = found.statistics.sizes["regime"]
    return {
        "regime_maps": k, "eof_maps": min(STYLE.eof_modes, found.eofs.sizes["mode"]), "monthly_frequency": 1,
        "yearly_frequency": k, "transitions": 2, "durations": k, "timeline": 1, "scan_diagnostics": 5,
    }


def test_run_wrote_every_figure_and_the_report(finished_run):
    written = {p.name for p in finished_run.iterdir()}
    for spec in figures.CATALOGUE:
        if spec.needs in ("results", "eofs"):
            assert f"{spec.stem}.png" in written
    assert "report.html" in written
    assert not [name for name in written if ".partial-" in name]  # atomic writes leave no temporary files


def assert_coastlines_drawn(fig) -> None:
    """Every map panel has a coastline from the bundled data, and hiding it changes the picture."""
    coasts = [a for ax in panels(fig) for a in ax.artists + ax.collections if a.get_gid() == "coastline"]
    assert len(coasts) == len(panels(fig))
    assert {a.get_label() for a in coasts} == {"bundled 110m"}
    with_coast = pixels(fig)
    for artist in coasts:
        artist.set_visible(False)
    assert (with_coast != pixels(fig)).any(axis=-1).sum() > 500


def test_every_figure_is_a_valid_non_blank_image_with_the_expected_panels(finished_run, offline):
    """Each figure, drawn with the network blocked: its panels, its file (valid PNG, not blank), coastlines on maps."""
    found = finished.open_folder(finished_run)
    wanted = expected_panels(found)
    specs = figures.available(found)
    assert {s.stem for s in specs} == set(wanted)
    for spec in specs:
        with matplotlib.rc_context(figures.LOOK):
            fig = spec.draw(found, STYLE)
        assert len(panels(fig)) == wanted[spec.stem], spec.stem
        if spec.stem.endswith("_maps"):
            assert_coastlines_drawn(fig)
        folder = found.scan_folder if spec.needs == "scan" else found.folder
        path = folder / f"{spec.stem}.png"
        with Image.open(path) as image:  # PIL checks the PNG signature and chunks
            image.verify()
        with Image.open(path) as image:
            width, height = image.size
            colours = np.unique(np.asarray(image.convert("RGB")).reshape(-1, 3), axis=0)
        assert width >= 600 and height >= 200, (spec.stem, image.size)
        assert len(colours) > 16, spec.stem  # not blank: a blank page is one colour


def test_bundled_coastline_runs_along_known_coasts():
    points = np.concatenate([np.asarray(line.coords) for line in coastline.bundled()])
    assert np.all(np.abs(points[:, 0]) <= 180) and np.all(np.abs(points[:, 1]) <= 90)

    def nearest(lat, lon):
        return np.min(np.hypot(points[:, 1] - lat, (points[:, 0] - lon) * np.cos(np.radians(lat))))

    # coastal places (geography, from memory): Reykjavik 64.1 N 21.9 W, Cape Town 33.9 S 18.4 E, Sydney 33.9 S 151.2 E
    for lat, lon in ((64.1, -21.9), (-33.9, 18.4), (-33.9, 151.2)):
        assert nearest(lat, lon) < 1.0
    # open ocean: the middle of the North Atlantic and of the South Pacific are far from any coast
    assert nearest(35.0, -40.0) > 5.0 and nearest(-40.0, -120.0) > 10.0


def test_cartopy_coastline_is_used_when_it_is_on_disk(tmp_path, monkeypatch, offline):
    target = tmp_path / "cartopy" / "shapefiles" / "natural_earth" / "physical" / "ne_110m_coastline"
    target.parent.mkdir(parents=True)
    with shapefile.Writer(str(target), shapeType=shapefile.POLYLINE) as w:  # a one-line stand-in written with pyshp
        w.field("name", "C")
        w.line([[[-10.0, 50.0], [0.0, 55.0], [10.0, 60.0]]])
        w.record("stand-in")
    monkeypatch.setitem(cartopy.config, "pre_existing_data_dir", tmp_path / "cartopy")
    name, lines = coastline.source()
    assert name == "cartopy 110m"
    assert len(lines) == 1 and lines[0].length == pytest.approx(np.hypot(10, 5) * 2)


# --------------------------------------------------------------------------
# colour scale and titles
# --------------------------------------------------------------------------


def test_regime_maps_share_one_symmetric_scale_and_name_each_regime(finished_run, offline):
    found = finished.open_folder(finished_run)
    with matplotlib.rc_context(figures.LOOK):
        fig = figures.regime_maps(found, STYLE)
    filled = [c for ax in panels(fig) for c in ax.collections if isinstance(c, ContourSet) and c.filled]
    assert len(filled) == found.statistics.sizes["regime"]
    levels = filled[0].levels
    for c in filled[1:]:
        np.testing.assert_array_equal(c.levels, levels)
    np.testing.assert_allclose(levels, -levels[::-1])  # symmetric about zero
    top = float(np.nanmax(np.abs(found.composites["anomaly_composite"].values))) / 100  # Pa -> hPa
    assert levels[-1] >= top and levels[-1] - top < levels[1] - levels[0]
    assert filled[0].get_cmap().name == "RdBu_r"
    for ax, r, name in zip(panels(fig), found.statistics["regime"].values, ["zonal", "blocked", "ridge"]):
        freq = 100 * float(found.statistics["frequency"].sel(regime=r))
        assert ax.get_title(loc="left").startswith(f"Regime {r} · {name} · {freq:.1f} % of days")


# --------------------------------------------------------------------------
# map geometry
# --------------------------------------------------------------------------


@pytest.mark.parametrize("lon", [np.arange(150.0, 251.0, 5.0), np.arange(150.0, 251.0, 5.0) % 360 - 360 * (np.arange(150.0, 251.0, 5.0) > 180)])
def test_a_region_across_180_is_found_in_either_longitude_convention(lon):
    region = maps.region_of(np.arange(20.0, 71.0, 5.0), lon)
    assert (region.west, region.span, region.south, region.north) == (150.0, 100.0, 20.0, 70.0)
    assert region.centre == pytest.approx(-160.0) and not region.full_circle


def test_regions_across_0_and_all_the_way_round():
    across_zero = maps.region_of([40.0, 60.0], np.r_[np.arange(300.0, 360.0, 5.0), np.arange(0.0, 61.0, 5.0)])
    assert (across_zero.west, across_zero.span, across_zero.centre) == (-60.0, 120.0, 0.0)
    around = maps.region_of([-20.0, 20.0], np.arange(0.0, 360.0, 2.5))
    assert around.full_circle and around.span == 360.0


@pytest.mark.parametrize("lat, lon, expected", [
    ((20.0, 80.0), np.arange(-90.0, 31.0, 5.0), "lambert-conformal"),  # mid-latitude sector
    ((-70.0, -20.0), np.arange(-60.0, 61.0, 5.0), "lambert-conformal"),  # southern mid-latitude sector
    ((30.0, 90.0), np.arange(0.0, 360.0, 5.0), "polar-stereographic"),  # northern polar cap
    ((-90.0, -50.0), np.arange(-180.0, 180.0, 5.0), "polar-stereographic"),  # southern polar cap
    ((-20.0, 20.0), np.arange(0.0, 360.0, 5.0), "plate-carree"),  # tropical band
    ((-10.0, 40.0), np.arange(-180.0, 180.0, 5.0), "plate-carree"),  # straddles the equator
])
def test_auto_projection_suits_the_region(lat, lon, expected):
    region = maps.region_of(np.array(lat), lon)
    assert maps.choose(region) == expected
    assert maps.choose(region, "polar-stereographic") == "polar-stereographic"  # a configured projection wins
    straddles = region.south < 0 < region.north
    # ... except a cone for a region on both sides of the equator, which no cone can hold
    assert maps.choose(region, "albers-equal-area") == ("plate-carree" if straddles else "albers-equal-area")


def test_a_map_across_180_draws_the_whole_box_without_a_seam(offline):
    lat, lon = np.arange(20.0, 71.0, 5.0), np.r_[np.arange(150.0, 180.0, 5.0), np.arange(-180.0, -109.0, 5.0)]
    field = xr.DataArray(np.cos(np.radians(lon))[None, :] * np.ones((lat.size, 1)), dims=("lat", "lon"), coords={"lat": lat, "lon": lon})
    region = maps.region_of(lat, lon)
    x, _, values = maps.continuous(field, region)
    assert np.all(np.diff(x) > 0) and x[-1] - x[0] == pytest.approx(region.span)  # continuous across 180
    np.testing.assert_allclose(values[0], np.cos(np.radians(region.centre + x)))  # each value at its own longitude
    fig = matplotlib.figure.Figure()
    ax = fig.add_subplot(projection=maps.projection(region, "plate-carree"))
    maps.draw_field(ax, field, region, np.linspace(-1, 1, 9), matplotlib.colormaps["RdBu_r"])
    west, east, south, north = ax.get_extent(region.frame)
    assert (west, east) == pytest.approx((-50.0, 50.0)) and (south, north) == pytest.approx((20.0, 70.0))
    assert ax.projection.proj4_params["pm"] == pytest.approx(-160.0)  # centred on the box, the seam is on the far side


# --------------------------------------------------------------------------
# regimes plot
# --------------------------------------------------------------------------


def test_plot_reproduces_the_figures_without_touching_the_results(finished_run, tmp_path):
    folder = tmp_path / "copy"
    shutil.copytree(finished_run, folder)
    results = {p.name: p.read_bytes() for p in folder.glob("*.nc")}
    drawn = {p.name: p.read_bytes() for p in folder.glob("*.png")}
    for p in [*folder.glob("*.png"), folder / "report.html"]:
        p.unlink()
    assert cli.main(["--quiet", "plot", str(folder), "--dpi", "80"]) == 0
    assert {p.name: p.read_bytes() for p in folder.glob("*.png")} == drawn  # same pixels, byte for byte
    assert {p.name: p.read_bytes() for p in folder.glob("*.nc")} == results
    assert 'id="scan_diagnostics"' in (folder / "report.html").read_text()  # the scan in scan/ is part of the report


def test_a_run_over_an_earlier_one_leaves_none_of_its_figures(finished_run, tmp_path):
    folder = tmp_path / "again"
    shutil.copytree(finished_run, folder)
    (folder / "regime_maps.pdf").write_bytes(b"%PDF- from an earlier run")
    job = tmp_path / "job.toml"
    job.write_text(f'[data]\npaths = ["{finished_run.parent / "psl.nc"}"]\nvariable = "psl"\n[eof]\nmodes = 3\n'
                   '[regimes]\nk = 2\nrestarts = 2\n[figures]\ndraw = false\n[output]\ndir = "again"\n')
    cfg, text = config.load(job)
    pipeline.run(cfg, text, overwrite=True)
    left = {p.name for p in folder.iterdir()}
    assert left == set(finished.RUN_FILES) | {"scan"}  # the scan is the scan's, not the run's


def test_plot_of_a_scan_folder_draws_the_scan_figure(finished_run, tmp_path):
    folder = tmp_path / "scan"
    shutil.copytree(finished_run / "scan", folder)
    (folder / "scan_diagnostics.png").unlink()
    assert cli.main(["--quiet", "plot", str(folder)]) == 0
    assert sorted(p.name for p in folder.iterdir()) == ["scan.nc", "scan_diagnostics.png"]  # a scan alone has no report


@pytest.mark.parametrize("content", [[], ["labels.nc"], ["labels.nc", "composites.nc", "statistics.nc", "eofs.nc"]])
def test_plot_refuses_a_folder_that_is_not_a_finished_run(finished_run, tmp_path, content, capsys):
    folder = tmp_path / "partial"
    folder.mkdir()
    for name in content:
        shutil.copy(finished_run / name, folder / name)
    assert cli.main(["plot", str(folder)]) == 2
    lines = capsys.readouterr().err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("regimes: error:") and "not a finished run" in lines[0]
    assert sorted(p.name for p in folder.iterdir()) == sorted(content)  # nothing written


def test_a_damaged_result_file_is_a_user_error(finished_run, tmp_path):
    folder = tmp_path / "damaged"
    shutil.copytree(finished_run, folder)
    (folder / "statistics.nc").write_bytes(b"not a netcdf file")
    with pytest.raises(UserError, match="statistics.nc"):
        finished.open_folder(folder)


def test_figure_settings_come_from_the_recorded_config_with_overrides():
    text = '[data]\npaths = ["x.nc"]\nvariable = "psl"\n[figures]\nformat = "pdf"\ndpi = 300\n'
    style = config.figure_settings(text, {"dpi": 100, "projection": None})
    assert (style.format, style.dpi, style.projection) == ("pdf", 100, "auto")
    with pytest.raises(UserError, match="figures.format"):
        config.figure_settings('[figures]\nformat = "gif"\n')


def test_pdf_and_svg_figures(finished_run, offline):
    found = finished.open_folder(finished_run)
    with matplotlib.rc_context(figures.LOOK):
        fig = figures.monthly_frequency(found, STYLE)
        pdf, svg = report.render(fig, "pdf", 80), report.render(fig, "svg", 80).decode()
    assert pdf.startswith(b"%PDF-")  # PDF header (ISO 32000-1, section 7.5.2)
    assert svg.lstrip().startswith("<?xml") and "<svg" in svg  # an XML document with an svg root (W3C SVG 1.1)
