"""Campaign files and project defaults: a campaign kept as a file builds the same list as the
same options typed out, is stored in the log, and rebuilds exactly from it."""

from __future__ import annotations

import shutil
from pathlib import Path

import polars as pl
import pytest
from click.testing import CliRunner

from reachlist.campaign_file import read_campaign_file, read_project_defaults
from reachlist.cli import main
from reachlist.errors import InputError
from reachlist.sample import KEY_SKUS

MAT = KEY_SKUS["heated_mat"]

CAMPAIGN = f"""\
id = "winter-mats"
target = "{MAT}"
send_date = 2026-12-07

[rules]
top = 3

[exclusions]
cap_days = 0

[holdout]
share = 0.2

[offer]
code = "MAT-15"
"""


def run(*args: str, env: dict[str, str] | None = None):
    return CliRunner(env=env).invoke(main, list(args), catch_exceptions=False)


def test_a_file_builds_what_the_same_options_build(sample: Path, tmp_path: Path) -> None:
    spec = tmp_path / "mats.toml"
    spec.write_text(CAMPAIGN)
    twin = tmp_path / "twin.duckdb"  # the typed build runs on its own copy: on the same log the
    shutil.copy(sample, twin)  # first campaign's holdout would be kept out of the second
    by_file = run(
        "build",
        "-w",
        str(sample),
        "--campaign-file",
        str(spec),
        "--no-estimate",
        "--out",
        str(tmp_path / "file.csv"),
    )
    assert by_file.exit_code == 0, by_file.output
    typed = run(
        "build",
        MAT,
        "-w",
        str(twin),
        "--no-estimate",
        "--campaign",
        "typed",
        "--send-date",
        "2026-12-07",
        "--top",
        "3",
        "--cap-days",
        "0",
        "--holdout",
        "0.2",
        "--offer-code",
        "MAT-15",
        "--out",
        str(tmp_path / "typed.csv"),
    )
    assert typed.exit_code == 0, typed.output
    a, b = pl.read_csv(tmp_path / "file.csv"), pl.read_csv(tmp_path / "typed.csv")
    # the holdout hashes the campaign id, so compare everyone listed (treatment and holdout)
    listed_a = set(a["customer_id"]) | set(
        pl.read_csv(tmp_path / "file.holdout.csv")["customer_id"]
    )
    listed_b = set(b["customer_id"]) | set(
        pl.read_csv(tmp_path / "typed.holdout.csv")["customer_id"]
    )
    assert listed_a == listed_b and set(a["offer_code"]) == {"MAT-15"}
    assert set(a["campaign_id"]) == {"winter-mats"}
    # the log keeps the file as written; it rebuilds the identical list
    stored = run("campaigns", "-w", str(sample), "--file-of", "winter-mats")
    assert stored.exit_code == 0 and stored.output == CAMPAIGN
    again = tmp_path / "again.toml"
    again.write_text(stored.output)
    rebuilt = run(
        "build",
        "-w",
        str(sample),
        "--campaign-file",
        str(again),
        "--no-estimate",
        "--out",
        str(tmp_path / "again.csv"),
        "--replace",
    )
    assert rebuilt.exit_code == 0, rebuilt.output
    assert pl.read_csv(tmp_path / "again.csv").equals(a)


def test_the_command_line_wins_over_the_file(sample: Path, tmp_path: Path) -> None:
    spec = tmp_path / "mats.toml"
    spec.write_text(CAMPAIGN)
    result = run(
        "sizes",
        "-w",
        str(sample),
        "--campaign-file",
        str(spec),
        "--no-estimate",
        "--holdout",
        "0.5",
    )
    assert result.exit_code == 0, result.output
    assert "50% by hash" in " ".join(result.output.split())


@pytest.mark.parametrize(
    ("text", "found"),
    [
        ("target = 'X'\n[rules]\ntopp = 3\n", "did you mean 'top'?"),
        ("target = 'X'\n[exclusions]\nignore_consent = true\n", "found 'ignore_consent'"),
        ("target = 'X'\n[holdout]\nshare = 'ten'\n", "holdout.share to be a number"),
        ("[rules]\ntop = 3\n", "Expected a target"),
        ("target = \n", "does not parse"),
        ("target = 'X'\n[offers]\ncode = 'A'\n", "did you mean 'offer'?"),
    ],
)
def test_a_wrong_file_is_one_clear_error(tmp_path: Path, text: str, found: str) -> None:
    spec = tmp_path / "bad.toml"
    spec.write_text(text)
    with pytest.raises(InputError) as refused:
        read_campaign_file(spec)
    assert found in str(refused.value)


def test_a_wrong_file_on_the_command_line_is_one_line(sample: Path, tmp_path: Path) -> None:
    spec = tmp_path / "bad.toml"
    spec.write_text("target = 'X'\n[rules]\ntopp = 3\n")
    result = run("sizes", "-w", str(sample), "--campaign-file", str(spec))
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert result.exit_code == 2 and len(lines) == 1 and "topp" in lines[0]
    folder = run("sizes", "-w", str(sample), "--campaign-file", str(tmp_path))
    assert folder.exit_code == 2 and "found a folder" in folder.output


def test_project_defaults_apply_to_every_command(sample: Path, tmp_path: Path) -> None:
    defaults = tmp_path / "reachlist.toml"
    defaults.write_text(f'[defaults]\nwarehouse = "{sample}"\nholdout = 0.3\ncap_days = 0\n')
    assert read_project_defaults(defaults) == {
        "warehouse": str(sample),
        "holdout": 0.3,
        "cap_days": 0,
    }
    env = {"REACHLIST_DEFAULTS": str(defaults), "REACHLIST_WAREHOUSE": None}
    result = run("sizes", MAT, "--no-estimate", env=env)  # no -w: the project file names it
    assert result.exit_code == 0, result.output
    assert "30% by hash" in " ".join(result.output.split())
    bad = tmp_path / "bad.toml"
    bad.write_text("[defaults]\nholdot = 0.3\n")
    refused = run("sizes", MAT, env={"REACHLIST_DEFAULTS": str(bad)})
    assert refused.exit_code == 2 and "did you mean 'holdout'?" in refused.output
