"""Settings: defaults < TOML file < BLOTTER_* environment < flags, and clear errors for bad ones."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from blotter.config import ConfigError, Settings, config_path, load_settings

FILE = """
desk_tz = "Europe/London"
estimate_order = 1
watch_interval_s = 2.0
ladder_vol_pts = [-3, 0, 3]

[alerts]
error_pct = 5
delta_cash = 1000000

[keys]
help = "h,f1"
"""


def test_defaults_without_a_file(tmp_path: Path) -> None:
    settings = load_settings(env={"XDG_CONFIG_HOME": str(tmp_path)})
    assert settings == Settings()
    assert config_path({"XDG_CONFIG_HOME": str(tmp_path)}) == tmp_path / "blotter" / "config.toml"


def test_file_then_environment_then_flags(tmp_path: Path) -> None:
    path = tmp_path / "config.toml"
    path.write_text(FILE, encoding="utf-8")
    env = {"BLOTTER_CONFIG": str(path)}
    settings = load_settings(env=env)
    assert settings.desk_tz == "Europe/London" and settings.estimate_order == 1
    assert settings.ladder_vol_pts == (-3.0, 0.0, 3.0)
    assert settings.alerts.error_pct == 5.0 and settings.alerts.delta_cash == 1e6
    assert settings.alerts.error_abs == Settings().alerts.error_abs
    assert settings.keymap == {"help": "h,f1"}

    env |= {
        "BLOTTER_ESTIMATE_ORDER": "2",
        "BLOTTER_ALERT_ERROR_PCT": "7.5",
        "BLOTTER_KEYS": "quit=x,f10;group=y,f4",
        "BLOTTER_TZ": "Asia/Tokyo",
    }
    settings = load_settings(env=env)
    assert settings.estimate_order == 2 and settings.alerts.error_pct == 7.5
    assert settings.keymap == {"help": "h,f1", "quit": "x,f10", "group": "y,f4"}
    assert settings.desk_tz == "Asia/Tokyo"
    desk = {k: v for k, v in env.items() if k != "BLOTTER_TZ"} | {"BLOTTER_DESK_TZ": "UTC"}
    assert load_settings(env=desk).desk_tz == "UTC"

    assert settings.theme == "dark"
    path.write_text(FILE.replace("estimate_order = 1", 'theme = "light"'), encoding="utf-8")
    assert load_settings(env=env).theme == "light"
    assert load_settings(env=env | {"BLOTTER_THEME": "dark"}).theme == "dark"
    path.write_text(FILE, encoding="utf-8")

    settings = load_settings({"read_only": True, "estimate_order": 1}, env=env)
    assert settings.read_only and settings.estimate_order == 1


@pytest.mark.parametrize(
    "text,words",
    [
        ("estimate_order = 3", "estimate_order must be 1 or 2"),
        ('theme = "blue"', "theme must be dark or light, not 'blue'"),
        ('desk_tz = "Mars/Base"', "not a known time zone"),
        ('colour = "red"', "unknown setting 'colour'"),
        ("[alerts]\nerror_pc = 5", "unknown alert 'error_pc'"),
        ('[keys]\nquit = "ctrl+q"', "does not arrive reliably"),
        ('[keys]\nnothing = "x"', "unknown binding id 'nothing'"),
        ('watch_interval_s = "soon"', "is not a valid float"),
        ("estimate_order = ", "config.toml"),
        ("watch_interval_s = nan", "watch_interval_s must be a finite number"),
        ("watch_interval_s = inf", "watch_interval_s must be a finite number"),
        ("watch_interval_s = 86400", "watch_interval_s must be at most 3600"),
        ("feed_throttle_s = -1", "feed_throttle_s must not be negative"),
        ("spot_stale_s = -5", "spot_stale_s must not be negative"),
        ("feed_throttle_s = 7200", "feed_throttle_s must be at most 3600"),
        ("ladder_vol_pts = [-5.0, nan]", "ladder_vol_pts[1] must be a finite number"),
        ("[alerts]\nvega_pt = nan", "[alerts] vega_pt must be a finite number"),
    ],
)
def test_bad_settings_are_refused_with_the_reason(tmp_path: Path, text: str, words: str) -> None:
    path = tmp_path / "config.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ConfigError, match=re.escape(words)):
        load_settings(env={"BLOTTER_CONFIG": str(path)})


def test_environment_errors_name_the_variable() -> None:
    with pytest.raises(ConfigError, match="BLOTTER_KEYS"):
        load_settings(env={"BLOTTER_KEYS": "help"})
    with pytest.raises(ConfigError, match="name two desk zones"):
        load_settings(env={"BLOTTER_TZ": "Asia/Tokyo", "BLOTTER_DESK_TZ": "UTC"})
    with pytest.raises(ConfigError, match="environment: estimate_order"):
        load_settings(env={"BLOTTER_ESTIMATE_ORDER": "two"})


def test_config_does_not_load_textual_or_the_ui() -> None:
    """Settings sit below the UI: checking a keymap loads neither Textual nor ``blotter.ui``."""
    code = (
        "import sys, blotter.config as c\n"
        "c.load_settings(env={'BLOTTER_KEYS': 'quit=x,f10'})\n"
        "print(sorted(m for m in sys.modules if m.split('.')[0] == 'textual'"
        " or m.startswith('blotter.ui')))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
