"""configs/reference.toml is the schema's own commented listing, kept in step with it."""

from pathlib import Path

from regimes import config


def test_reference_config_matches_the_schema():
    shipped = (Path(__file__).parent.parent / "configs" / "reference.toml").read_text()
    assert shipped == config.reference_text(), "regenerate configs/reference.toml from regimes.config.reference_text()"


def test_demo_config_validates():
    cfg, _ = config.load(Path(__file__).parent.parent / "configs" / "demo.toml")
    assert cfg.regimes.k == 4 and cfg.data.months == [12, 1, 2]
