"""Settings of the app: defaults < TOML file < ``BLOTTER_*`` environment < typed flags.

The file is ``$BLOTTER_CONFIG``, else ``$XDG_CONFIG_HOME/blotter/config.toml`` (``~/.config``
when unset); a missing file is fine, a malformed one is an error naming the file and the key.
Nothing here imports the UI or Textual (a keymap is checked by ``blotter.keymap``), so report
commands can read the desk time zone too.

Example file::

    desk_tz = "America/New_York"
    estimate_order = 2          # what the Move pane shows first: 1 or 2
    watch_interval_s = 0.5      # how often the app checks the file for others' commits; 0 = never
    theme = "dark"              # the app's colours: "dark" or "light" (NO_COLOR is honoured too)
    feed_throttle_s = 1.0       # `blotter feed` writes each underlying at most this often
    spot_stale_s = 300.0        # an intraday spot older than this is STALE in words; 0 = never
    pane_refresh_s = 5.0        # Grid and Reval under others' commits (a feed): at most this often
    log_file = "~/blotter.log"  # warnings and errors of imports and the store, with UTC times

    [alerts]
    error_pct = 10.0            # flag an estimate whose |error| exceeds this % of |full change|
    error_abs = 1000.0          # ... and exceeds this much currency
    delta_cash = 5000000.0      # book limit on |Δ $|; 0 = none
    vega_pt = 50000.0           # book limit on |vega| per vol point; 0 = none
    ladder_loss = 2000000.0     # book limit on the worst ladder cell's loss; 0 = none
    underlying_delta_cash = 2000000.0   # the same limits for each underlying
    underlying_vega_pt = 20000.0
    underlying_ladder_loss = 1000000.0

    [keys]                      # binding id = comma-separated keys (see the help screen)
    help = "question_mark,f1"
    quit = "q,f10"

    [scenarios.crash]           # a named set of what-if moves: move name = move line
    "down 10, vol +8" = "spot -10% vol +8"
    "down 20, vol +15" = "spot -20% vol +15"

``scenarios_file`` names a TOML file of more ``[scenarios.NAME]`` tables (relative to the
settings file's folder); ``blotter.desk.scenario_sets`` reads it and parses every move.
"""

from __future__ import annotations

import math
import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from blotter.keymap import check_keymap


class ConfigError(ValueError):
    """A setting that cannot be used; the message names where it came from."""


@dataclass(frozen=True)
class Alerts:
    """Thresholds the app marks with a symbol as well as colour. Money in the book's currency."""

    error_pct: float = 10.0  # |full − estimate| above this % of |full| is flagged
    error_abs: float = 100.0  # ... and only when |full − estimate| is above this amount
    delta_cash: float = 0.0  # book |Δ $| limit; 0 = no limit
    vega_pt: float = 0.0  # book |vega| limit per vol point; 0 = no limit
    ladder_loss: float = 0.0  # book limit on the worst ladder cell's loss (a positive amount)
    underlying_delta_cash: float = 0.0  # |Δ $| limit of each underlying; 0 = no limit
    underlying_vega_pt: float = 0.0  # |vega| per vol point limit of each underlying
    underlying_ladder_loss: float = 0.0  # worst ladder cell's loss limit of each underlying


MAX_SET_MOVES = 100
"""Most moves one scenario set may hold: one table a person reads."""


@dataclass(frozen=True)
class ScenarioSetText:
    """One named set of what-if moves as a TOML file spells it; ``blotter.desk.scenario_sets``
    parses the move lines (the grammar sits above the settings)."""

    name: str
    moves: tuple[tuple[str, str], ...]  # (move name, move line), in the file's order
    source: str  # the file the set came from


@dataclass(frozen=True)
class Settings:
    """Everything the app reads at start. ``keymap`` maps binding ids to comma-separated keys."""

    desk_tz: str = "America/New_York"
    estimate_order: int = 2
    watch_interval_s: float = 0.5
    debounce_ms: float = 15.0
    ladder_spot_pcts: tuple[float, ...] = (-10.0, -5.0, -2.0, -1.0, 0.0, 1.0, 2.0, 5.0, 10.0)
    ladder_vol_pts: tuple[float, ...] = (-5.0, -2.0, 0.0, 2.0, 5.0)
    profile_spot_pct: float = 15.0  # the profile's spot axis runs ± this many %
    profile_points: int = 31  # spot steps across the profile
    profile_days: int = 30  # the profile's days-forward axis runs 0..this
    alerts: Alerts = field(default_factory=Alerts)
    keymap: dict[str, str] = field(default_factory=dict)
    read_only: bool = False
    no_mouse: bool = False
    theme: str = "dark"  # one of THEMES
    feed_throttle_s: float = 1.0  # seconds between two writes of one underlying by a feed
    spot_stale_s: float = 300.0  # an intraday spot older than this is STALE; 0 = never
    pane_refresh_s: float = 5.0  # Grid and Reval under others' commits: at most this often
    log_file: str = ""  # append the log (imports, the store) to this file; "" = no log
    scenarios: tuple[ScenarioSetText, ...] = ()  # the settings file's [scenarios] tables
    scenarios_file: str = ""  # a TOML file of more [scenarios.NAME] tables; "" = none

    @property
    def tz(self) -> ZoneInfo:
        """The desk's time zone."""
        return ZoneInfo(self.desk_tz)


THEMES = ("dark", "light")
"""The app's colour themes: light text on a dark ground, or dark text on a light one. With
``NO_COLOR`` set either is drawn without colour (Textual's monochrome filter)."""

DESK_TZ_SOURCES = (
    "desk_tz in the settings file, $BLOTTER_TZ or $BLOTTER_DESK_TZ over it, "
    "default America/New_York"
)
"""Where the desk's time zone comes from, in words for help texts (``load_settings`` reads it)."""

ENV_PREFIX = "BLOTTER_"
"""Variables ``BLOTTER_<FIELD>`` set top-level settings; ``BLOTTER_ALERT_<FIELD>`` alerts;
``BLOTTER_KEYS="help=f1,question_mark;quit=q"`` the keymap."""


def config_path(env: Mapping[str, str] | None = None) -> Path:
    """Where the settings file is looked for."""
    env = os.environ if env is None else env
    if env.get("BLOTTER_CONFIG"):
        return Path(env["BLOTTER_CONFIG"])
    base = Path(env["XDG_CONFIG_HOME"]) if env.get("XDG_CONFIG_HOME") else Path.home() / ".config"
    return base / "blotter" / "config.toml"


def _coerce(where: str, name: str, default: Any, value: Any) -> Any:
    try:
        if isinstance(default, bool):
            if isinstance(value, str):
                if value.lower() in {"1", "true", "yes", "on"}:
                    return True
                if value.lower() in {"0", "false", "no", "off"}:
                    return False
                raise ValueError(value)
            return bool(value)
        if isinstance(default, int):
            if isinstance(value, float) and not value.is_integer():
                raise ValueError(value)
            return int(value)
        if isinstance(default, float):
            return float(value)
        if isinstance(default, str):
            if not isinstance(value, str):
                raise ValueError(value)
            return value
        if isinstance(default, tuple):
            items = value.split(",") if isinstance(value, str) else list(value)
            return tuple(float(v) for v in items)
    except (TypeError, ValueError):
        raise ConfigError(
            f"{where}: {name} = {value!r} is not a valid {type(default).__name__}"
        ) from None
    raise ConfigError(f"{where}: {name} cannot be set here")


def _apply(settings: Settings, values: Mapping[str, Any], where: str) -> Settings:
    plain = {f.name: f for f in fields(Settings)}.keys() - {"alerts", "keymap", "scenarios"}
    changes: dict[str, Any] = {}
    alerts = settings.alerts
    keymap = dict(settings.keymap)
    for name, value in values.items():
        if name == "alerts":
            if not isinstance(value, Mapping):
                raise ConfigError(f"{where}: [alerts] must be a table")
            alert_names = {f.name for f in fields(Alerts)}
            alert_changes = {}
            for a_name, a_value in value.items():
                if a_name not in alert_names:
                    raise ConfigError(
                        f"{where}: unknown alert {a_name!r} "
                        f"(known: {', '.join(sorted(alert_names))})"
                    )
                alert_changes[a_name] = _coerce(
                    where, f"alerts.{a_name}", getattr(alerts, a_name), a_value
                )
            alerts = replace(alerts, **alert_changes)
        elif name == "keys":
            if not isinstance(value, Mapping):
                raise ConfigError(f"{where}: [keys] must be a table")
            keymap.update({str(k): str(v) for k, v in value.items()})
        elif name == "scenarios" and where not in ("environment", "command line"):
            changes["scenarios"] = scenario_sets_from_toml(value, where)
        elif name == "scenarios_file" and isinstance(value, str) and value.strip():
            changes["scenarios_file"] = _beside(value, where)
        elif name in plain:
            changes[name] = _coerce(where, name, getattr(settings, name), value)
        else:
            raise ConfigError(f"{where}: unknown setting {name!r}")
    return replace(settings, alerts=alerts, keymap=keymap, **changes)


def _has_control(text: str) -> bool:
    return any(ord(c) < 32 or 127 <= ord(c) < 160 for c in text)


def scenario_sets_from_toml(value: Any, where: str) -> tuple[ScenarioSetText, ...]:
    """The ``[scenarios]`` table of a TOML file at ``where``: one table per set, each key a move
    name and each value a move line; ConfigError naming the file, the set and the move."""
    if not isinstance(value, Mapping):
        raise ConfigError(f"{where}: [scenarios] must hold tables: [scenarios.NAME]")
    out = []
    for set_name, moves in value.items():
        if not isinstance(moves, Mapping):
            raise ConfigError(
                f"{where}: scenario set {set_name!r} must be a table of "
                '"move name" = "move line" (e.g. "down 10" = "spot -10%")'
            )
        if not set_name.strip() or _has_control(set_name):
            raise ConfigError(f"{where}: scenario set name {set_name!r} is blank or unprintable")
        if not moves:
            raise ConfigError(f"{where}: scenario set {set_name!r} has no moves")
        if len(moves) > MAX_SET_MOVES:
            raise ConfigError(
                f"{where}: scenario set {set_name!r} has {len(moves)} moves; "
                f"at most {MAX_SET_MOVES}"
            )
        pairs = []
        for move_name, line in moves.items():
            if not isinstance(line, str):
                raise ConfigError(
                    f"{where}: scenario set {set_name!r}, move {move_name!r}: the move must "
                    f"be a line of text in quotes, not {line!r}"
                )
            if not move_name.strip() or _has_control(move_name) or _has_control(line):
                raise ConfigError(
                    f"{where}: scenario set {set_name!r}, move {move_name!r}: a blank or "
                    "unprintable name or line"
                )
            pairs.append((move_name.strip(), line))
        out.append(ScenarioSetText(set_name.strip(), tuple(pairs), where))
    return tuple(out)


def read_scenario_file(path: Path) -> tuple[ScenarioSetText, ...]:
    """The ``[scenarios.NAME]`` tables of the TOML file ``path``; ConfigError naming the file."""
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise ConfigError(f"{path}: no such scenario file") from None
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise ConfigError(f"{path}: {exc}") from None
    extra = sorted(set(data) - {"scenarios"})
    if extra:
        raise ConfigError(
            f"{path}: a scenario file holds [scenarios.NAME] tables only, not {', '.join(extra)}"
        )
    if "scenarios" not in data:
        raise ConfigError(f"{path}: no [scenarios.NAME] tables")
    return scenario_sets_from_toml(data["scenarios"], str(path))


def _beside(value: str, where: str) -> str:
    """``value`` as a path: ``~`` expanded, relative to the folder of the file ``where`` names."""
    path = Path(value).expanduser()
    if not path.is_absolute() and where not in ("environment", "command line"):
        path = Path(where).parent / path
    return str(path)


def _from_env(env: Mapping[str, str]) -> dict[str, Any]:
    plain = {f.name for f in fields(Settings)} - {"alerts", "keymap", "scenarios"}
    out: dict[str, Any] = {}
    alerts: dict[str, str] = {}
    for var, value in env.items():
        if not var.startswith(ENV_PREFIX) or var in {"BLOTTER_DB", "BLOTTER_CONFIG"}:
            continue
        name = var[len(ENV_PREFIX) :].lower()
        if name == "keys":
            keys: dict[str, str] = {}
            for part in value.split(";"):
                if part.strip():
                    binding_id, sep, keylist = part.partition("=")
                    if not sep:
                        raise ConfigError(f"{var}: expected id=keys;id=keys, got {part!r}")
                    keys[binding_id.strip()] = keylist.strip()
            out["keys"] = keys
        elif name == "tz":  # the calendar module's own variable names the same setting
            out.setdefault("desk_tz", value)
        elif name.startswith("alert_"):
            alerts[name[len("alert_") :]] = value
        elif name in plain:
            out[name] = value
    if "BLOTTER_DESK_TZ" in env:
        if "BLOTTER_TZ" in env and env["BLOTTER_TZ"] != env["BLOTTER_DESK_TZ"]:
            raise ConfigError(
                f"BLOTTER_TZ ({env['BLOTTER_TZ']}) and BLOTTER_DESK_TZ "
                f"({env['BLOTTER_DESK_TZ']}) name two desk zones; set one of them"
            )
        out["desk_tz"] = env["BLOTTER_DESK_TZ"]
    if alerts:
        out["alerts"] = alerts
    return out


MAX_WATCH_INTERVAL_S = 3600.0
"""Longest wait between two looks for other processes' commits (an hour)."""


def _numbers(settings: Settings) -> list[tuple[str, float]]:
    """Every number of ``settings`` (alerts and list items included), named for a message."""
    out: list[tuple[str, float]] = []
    for f in fields(Settings):
        value = getattr(settings, f.name)
        if isinstance(value, float):
            out.append((f.name, value))
        elif isinstance(value, tuple) and f.name != "scenarios":
            out += [(f"{f.name}[{i}]", float(v)) for i, v in enumerate(value)]
    out += [
        (f"[alerts] {f.name}", float(getattr(settings.alerts, f.name)))
        for f in fields(Alerts)
    ]
    return out


def _validate(settings: Settings) -> Settings:
    try:
        ZoneInfo(settings.desk_tz)
    except (ZoneInfoNotFoundError, ValueError):
        raise ConfigError(
            f"desk_tz {settings.desk_tz!r} is not a known time zone (e.g. America/New_York)"
        ) from None
    if settings.theme not in THEMES:
        raise ConfigError(f"theme must be {' or '.join(THEMES)}, not {settings.theme!r}")
    if settings.estimate_order not in (1, 2):
        raise ConfigError(f"estimate_order must be 1 or 2, not {settings.estimate_order}")
    for name, value in _numbers(settings):
        if not math.isfinite(value):
            raise ConfigError(f"{name} must be a finite number, not {value!r}")
    if settings.watch_interval_s < 0 or settings.debounce_ms < 0:
        raise ConfigError("watch_interval_s and debounce_ms must not be negative")
    if settings.feed_throttle_s < 0:
        raise ConfigError("feed_throttle_s must not be negative (seconds)")
    if settings.spot_stale_s < 0:
        raise ConfigError("spot_stale_s must not be negative (seconds; 0 = never stale)")
    if not 0 <= settings.pane_refresh_s <= MAX_WATCH_INTERVAL_S:
        raise ConfigError(
            f"pane_refresh_s must be 0 to {MAX_WATCH_INTERVAL_S:g} (seconds; 0 = on every "
            f"commit), not {settings.pane_refresh_s:g}"
        )
    if settings.feed_throttle_s > MAX_WATCH_INTERVAL_S:
        raise ConfigError(
            f"feed_throttle_s must be at most {MAX_WATCH_INTERVAL_S:g} (seconds), "
            f"not {settings.feed_throttle_s:g}"
        )
    if settings.watch_interval_s > MAX_WATCH_INTERVAL_S:
        raise ConfigError(
            f"watch_interval_s must be at most {MAX_WATCH_INTERVAL_S:g} (seconds), or 0 to never "
            f"look for others' commits; not {settings.watch_interval_s:g}"
        )
    if not settings.ladder_spot_pcts or not settings.ladder_vol_pts:
        raise ConfigError("ladder_spot_pcts and ladder_vol_pts need at least one value each")
    if settings.profile_points < 3 or settings.profile_spot_pct <= 0 or settings.profile_days < 1:
        raise ConfigError(
            "profile_points >= 3, profile_spot_pct > 0 and profile_days >= 1 are needed"
        )
    problems = check_keymap(settings.keymap)
    if problems:
        raise ConfigError("keymap: " + "; ".join(problems))
    return settings


def load_settings(
    flags: Mapping[str, Any] | None = None,
    env: Mapping[str, str] | None = None,
    path: Path | None = None,
) -> Settings:
    """Settings from defaults, then the TOML file, then ``BLOTTER_*`` variables, then ``flags``.

    ``flags`` holds typed values given on the command line (e.g. ``{"read_only": True}``); a flag
    that was not given should be left out rather than passed as False. Raises ``ConfigError``.
    """
    env = os.environ if env is None else env
    settings = Settings()
    file = path if path is not None else config_path(env)
    if file.is_file():
        try:
            data = tomllib.loads(file.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
            raise ConfigError(f"{file}: {exc}") from None
        settings = _apply(settings, data, str(file))
    elif path is not None:
        raise ConfigError(f"{file}: no such settings file")
    env_values = _from_env(env)
    if env_values:
        settings = _apply(settings, env_values, "environment")
    if flags:
        settings = _apply(settings, dict(flags), "command line")
    return _validate(settings)
