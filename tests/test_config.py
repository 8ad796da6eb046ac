"""Configuration: defaults load, a user file overrides, invalid values name their key."""
from __future__ import annotations

import pytest

from pacewire.config import DEFAULT_PATH, ConfigError, load_settings


def test_defaults_carry_the_published_thresholds():
    s = load_settings()
    # Bradley et al. 2009 / Di Salvo et al. 2009 bands, Akenhead et al. 2013 accel band
    assert (s.speed.hsr_ms, s.speed.sprint_ms) == (5.5, 7.0)
    assert (s.efforts.accel_ms2, s.efforts.decel_ms2) == (3.0, -3.0)
    assert s.metabolic.model == "osgnach2010" and s.metabolic.kt == 1.29
    assert s.kinematics.max_step_speed_ms == 12.5


def test_every_default_key_has_a_source_comment():
    lines = DEFAULT_PATH.read_text().splitlines()
    for i, line in enumerate(lines):
        if "=" in line and not line.lstrip().startswith("#"):
            above = lines[i - 1].strip() if i else ""
            assert above.startswith("#"), f"config/default.toml line {i + 1} ({line.strip()}) has no comment above it"


def test_user_file_overrides_one_key(tmp_path):
    f = tmp_path / "club.toml"
    f.write_text('[speed]\nhsr_ms = 5.8\n[metabolic]\nmodel = "diprampero2018"\n')
    s = load_settings(f)
    assert s.speed.hsr_ms == 5.8 and s.speed.sprint_ms == 7.0
    assert s.metabolic.model == "diprampero2018"


@pytest.mark.parametrize("text,key", [
    ("[speed]\nhsr_ms = -1\n", "speed.hsr_ms"),
    ("[speed]\nsprint_ms = 5.0\n", "speed"),
    ("[kinematics]\nsmooth_order = 9\n", "kinematics.smooth_order"),
    ('[metabolic]\nmodel = "guess"\n', "metabolic.model"),
    ("[zones]\nedges_ms = [4.0, 2.0]\n", "zones"),
    ("[speed]\nhrs_ms = 5.0\n", "speed.hrs_ms"),
    ('[windows]\nlast_min = "five"\n', "windows.last_min"),
    ('[kinematics]\nfeed_profile = "satellite"\n', "kinematics.feed_profile"),
    ("[kinematics.profiles.broadcast]\nsmooth_widow_s = 1.0\n", "kinematics.profiles.broadcast.smooth_widow_s"),
    ("[kinematics.profiles.drone]\nsmooth_window_s = 1.0\n", "kinematics.profiles.drone"),
    ("[kinematics]\njump_tolerance_m = 0.5\n", "kinematics.jump_tolerance_m"),
])
def test_invalid_value_names_the_key(tmp_path, text, key):
    f = tmp_path / "bad.toml"
    f.write_text(text)
    with pytest.raises(ConfigError) as exc:
        load_settings(f)
    assert key in str(exc.value)
    assert str(f) in str(exc.value)


def test_a_feed_profile_overrides_only_what_it_names(tmp_path):
    f = tmp_path / "club.toml"
    f.write_text('[kinematics]\nsmooth_window_s = 1.2\n[kinematics.profiles.broadcast]\nbridge_gap_s = 2.5\n')
    k = load_settings(f).kinematics
    # the base table is the optical profile (config/default.toml); a profile's table wins over it
    assert k.resolved("optical").smooth_window_s == 1.2 and k.resolved("optical").bridge_gap_s == 1.0
    b = k.resolved("broadcast")
    assert (b.smooth_window_s, b.bridge_gap_s, b.smooth_order, b.feed_profile) == (1.2, 2.5, 2, "broadcast")
    assert k.resolved().feed_profile == "optical"


def test_unreadable_or_broken_file(tmp_path):
    with pytest.raises(ConfigError, match="cannot read"):
        load_settings(tmp_path / "missing.toml")
    f = tmp_path / "broken.toml"
    f.write_text("[speed\n")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_settings(f)


def test_config_files_that_are_not_utf8_or_nest_too_deeply_get_a_clear_error(tmp_path):
    deep = tmp_path / "deep.toml"
    deep.write_text("a = " + "[" * 5000 + "1" + "]" * 5000 + "\n")
    binary = tmp_path / "binary.toml"
    binary.write_bytes(b"\xff\xfe[speed]\n")
    with pytest.raises(ConfigError, match="too deeply"):
        load_settings(deep)
    with pytest.raises(ConfigError, match="not UTF-8"):
        load_settings(binary)
