"""Campaign files and project defaults: options kept in TOML files instead of retyped.

A campaign file describes one campaign (our own layout; every key is optional except
``target``)::

    id = "winter-mats-2026"
    target = "SG04-104"
    purpose = "introduce"            # or "clear"
    send_date = 2026-12-07
    stand_in = "category:Heating"    # for an item without history

    [rules]                          # how rules are chosen
    level = "sku"
    top = 5
    rank_by = "leverage"
    ids = []                         # exact rule ids instead of the top ones
    since = 2025-12-01
    until = 2026-12-01
    min_support = 0.002
    max_antecedent = 3

    [exclusions]
    cap_days = 14
    bought_within_days = 365
    regions = ["North"]
    channels = []
    ordered_within_days = 180
    adult_age = 18

    [holdout]
    share = 0.1

    [estimate]
    horizon_days = 30
    cutoffs = 13
    min_audience = 50

    [offer]
    code = "MAT-WINTER-15"
    stock = 400                      # purpose "clear": units to clear

    [export]
    out = "winter-mats.csv"
    with_contact = true

Consent and suppression overrides are not accepted in a file: they must be typed on the command
line each time. Options given on the command line win over the file.

A project defaults file, ``reachlist.toml`` in the working directory (or the file named by
``REACHLIST_DEFAULTS``), holds defaults for every command::

    [defaults]
    warehouse = "garden.duckdb"
    mapping = "warehouse-mapping.toml"
    state = "reachlist-state.duckdb"
    holdout = 0.1
    cap_days = 14
    horizon_days = 30
    min_audience = 50

Order of precedence: command line, environment variables (``REACHLIST_WAREHOUSE``, ...), the
campaign file, the project defaults, reachlist's own defaults.
"""

from __future__ import annotations

import difflib
import os
import tomllib
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path
from typing import Any

from reachlist.errors import InputError

MAX_FILE_BYTES = 1_000_000  # a campaign file is a few hundred bytes; refuse anything huge

_TEXT, _INT, _NUMBER, _FLAG, _TEXTS, _DAY = (
    "text",
    "integer",
    "number",
    "true/false",
    "list of text",
    "date",
)

# section -> key -> (the command's parameter, expected kind)
CAMPAIGN_KEYS: dict[str, dict[str, tuple[str, str]]] = {
    "": {
        "id": ("campaign_id", _TEXT),
        "target": ("target", _TEXT),
        "purpose": ("purpose", _TEXT),
        "send_date": ("send_date", _DAY),
        "stand_in": ("stand_in", _TEXT),
    },
    "rules": {
        "level": ("level", _TEXT),
        "basket": ("basket", _TEXT),
        "since": ("since", _DAY),
        "until": ("until", _DAY),
        "min_support": ("min_support", _NUMBER),
        "min_confidence": ("min_confidence", _NUMBER),
        "min_lift": ("min_lift", _NUMBER),
        "max_antecedent": ("max_antecedent", _INT),
        "correction": ("correction", _TEXT),
        "top": ("top", _INT),
        "rank_by": ("rank_by", _TEXT),
        "ids": ("rule_ids", _TEXTS),
    },
    "exclusions": {
        "cap_days": ("cap_days", _INT),
        "bought_within_days": ("bought_within", _INT),
        "regions": ("regions", _TEXTS),
        "channels": ("channels", _TEXTS),
        "ordered_within_days": ("ordered_within", _INT),
        "adult_age": ("adult_age", _INT),
        "merge_duplicates": ("merge_duplicates", _FLAG),
    },
    "holdout": {"share": ("holdout", _NUMBER), "global_share": ("global_holdout", _NUMBER)},
    "estimate": {
        "horizon_days": ("horizon_days", _INT),
        "cutoffs": ("cutoffs", _INT),
        "min_audience": ("min_audience", _INT),
    },
    "offer": {"code": ("offer_code", _TEXT), "stock": ("stock", _INT)},
    "export": {"out": ("out_path", _TEXT), "with_contact": ("with_contact", _FLAG)},
}

DEFAULT_KEYS: dict[str, tuple[str, str]] = {
    "warehouse": ("warehouse", _TEXT),
    "mapping": ("mapping", _TEXT),
    "state": ("state", _TEXT),
    "holdout": ("holdout", _NUMBER),
    "global_holdout": ("global_holdout", _NUMBER),
    "cap_days": ("cap_days", _INT),
    "horizon_days": ("horizon_days", _INT),
    "adult_age": ("adult_age", _INT),
    "min_audience": ("min_audience", _INT),
    "cutoffs": ("cutoffs", _INT),
}

PROJECT_FILE = "reachlist.toml"


@dataclass(frozen=True)
class CampaignFile:
    path: str
    text: str  # the file as written, kept in the campaign log so the campaign can be rebuilt
    values: dict[str, Any]  # command parameter -> value


def _read(path: str | os.PathLike[str], what: str) -> tuple[str, dict[str, Any]]:
    p = Path(path)
    if not p.is_file():
        found = "a folder" if p.is_dir() else "nothing"
        raise InputError(
            f"Expected {what} (a TOML file) at {str(p)!r}, found {found}.",
            hint="check the path",
        )
    if p.stat().st_size > MAX_FILE_BYTES:
        raise InputError(
            f"Expected {what} of at most {MAX_FILE_BYTES:,} bytes, found "
            f"{p.stat().st_size:,} at {str(p)!r}.",
            hint="point to the TOML file itself",
        )
    raw = p.read_bytes()
    try:
        text = raw.decode("utf-8")
        data = tomllib.loads(text)
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InputError(
            f"Expected {what} in TOML at {str(p)!r}, found text that does not parse "
            f"({str(exc).splitlines()[0]}).",
            hint="fix the line named; the README's 'Campaign files' section shows the layout",
        ) from None
    return text, data


def _checked(value: Any, kind: str, where: str) -> Any:
    ok = {
        _TEXT: isinstance(value, str),
        _INT: isinstance(value, int) and not isinstance(value, bool),
        _NUMBER: isinstance(value, int | float) and not isinstance(value, bool),
        _FLAG: isinstance(value, bool),
        _TEXTS: isinstance(value, list) and all(isinstance(v, str) for v in value),
        _DAY: isinstance(value, date | str) and not isinstance(value, datetime),
    }[kind]
    if not ok:
        raise InputError(
            f"Expected {where} to be a {kind}, found {value!r}.",
            hint='write dates as 2026-12-07, lists as ["a", "b"], flags as true or false',
        )
    if kind == _TEXTS:
        return tuple(value)
    if kind == _DAY:
        return value.isoformat() if isinstance(value, date) else value
    return value


def _unknown(key: str, known: list[str], where: str, path: str) -> InputError:
    close = difflib.get_close_matches(key, known, n=1)
    return InputError(
        f"Expected a key of {', '.join(known)} in {where} of {path!r}, found {key!r}.",
        hint=f"did you mean {close[0]!r}?"
        if close
        else "see the README's 'Campaign files' section for every key",
    )


def read_campaign_file(path: str | os.PathLike[str]) -> CampaignFile:
    """Parse and check a campaign file; raises ``InputError`` naming the first wrong key."""
    text, data = _read(path, "a campaign file")
    values: dict[str, Any] = {}
    for key, value in data.items():
        if isinstance(value, dict):
            if key not in CAMPAIGN_KEYS or key == "":
                raise _unknown(key, [k for k in CAMPAIGN_KEYS if k], "the sections", str(path))
            section = CAMPAIGN_KEYS[key]
            for sub, sub_value in value.items():
                if sub not in section:
                    raise _unknown(sub, list(section), f"[{key}]", str(path))
                param, kind = section[sub]
                values[param] = _checked(sub_value, kind, f"{key}.{sub}")
        else:
            top = CAMPAIGN_KEYS[""]
            if key not in top:
                raise _unknown(
                    key, list(top) + [k for k in CAMPAIGN_KEYS if k], "the top level", str(path)
                )
            param, kind = top[key]
            values[param] = _checked(value, kind, key)
    if "target" not in values:
        raise InputError(
            f"Expected a target in the campaign file {str(path)!r}, found none.",
            hint='add a line such as target = "SG04-104" at the top',
        )
    return CampaignFile(str(path), text, values)


def project_defaults_path(cwd: str | os.PathLike[str] | None = None) -> Path | None:
    """The project defaults file in use: ``REACHLIST_DEFAULTS``, else ``reachlist.toml`` in the
    working directory when present."""
    named = os.environ.get("REACHLIST_DEFAULTS")
    if named:
        return Path(named)
    here = Path(cwd or os.getcwd()) / PROJECT_FILE
    return here if here.is_file() else None


def read_project_defaults(path: str | os.PathLike[str]) -> dict[str, Any]:
    """The ``[defaults]`` table of a project file, as command parameter -> value."""
    _, data = _read(path, "a project defaults file")
    extra = [k for k in data if k != "defaults"]
    if extra:
        raise _unknown(extra[0], ["defaults"], "the sections", str(path))
    table = data.get("defaults", {})
    if not isinstance(table, dict):
        raise InputError(
            f"Expected a [defaults] table in {str(path)!r}, found {table!r}.",
            hint="write the defaults under a [defaults] line",
        )
    values: dict[str, Any] = {}
    for key, value in table.items():
        if key not in DEFAULT_KEYS:
            raise _unknown(key, list(DEFAULT_KEYS), "[defaults]", str(path))
        param, kind = DEFAULT_KEYS[key]
        values[param] = _checked(value, kind, f"defaults.{key}")
    return values
