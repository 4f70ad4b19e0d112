"""Screens as a person sees them: at 80 columns nothing is cut that carries meaning, prose wraps
at word boundaries, `--ascii` is plain ASCII for logs and email, and `sizes`, `build`, `check`,
`overlap` and `estimate` speak JSON with numbers as numbers."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

from click.testing import CliRunner

from reachlist.cli import main
from reachlist.sample import KEY_SKUS

MAT = KEY_SKUS["heated_mat"]


def run(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def test_rules_and_sizes_fit_80_columns(pristine: Path) -> None:
    rules = run("--width", "80", "rules", MAT, "-w", str(pristine), "--top", "5")
    sizes = run(
        "--width", "80", "sizes", MAT, "-w", str(pristine), "--no-estimate", "--campaign", "x"
    )
    for result in (rules, sizes):
        assert result.exit_code == 0, result.output
        assert max(len(line) for line in result.output.splitlines()) <= 80, result.output
    # the antecedent column is there, whole: the two-item rule's items both show
    assert "antecedent" in rules.output and "PC06-101 + SG04-101" in rules.output
    assert "antecedent" in sizes.output and "SG04-101" in sizes.output
    # prose wraps at word boundaries: no line ends inside a word of the legend
    legend = " ".join(sizes.output.split())
    assert "co-purchase %: share of antecedent holders who also held the target" in legend


def test_ascii_mode_is_plain_ascii(pristine: Path) -> None:
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "reachlist.cli",
            "--ascii",
            "--width",
            "80",
            "sizes",
            MAT,
            "-w",
            str(pristine),
            "--no-estimate",
            "--campaign",
            "x",
        ],
        capture_output=True,
        check=True,
    )
    assert out.stdout.isascii() and out.stderr.isascii()
    assert b"Exclusions, in order" in out.stdout and b"\x1b[" not in out.stdout


def test_json_everywhere_has_numbers_as_numbers(pristine: Path) -> None:
    sizes = json.loads(
        run("sizes", MAT, "-w", str(pristine), "--no-estimate", "--campaign", "x", "--json").output
    )
    assert sizes["schema_version"] == 1 and isinstance(sizes["treatment"], int)
    steps = {s["step"]: s for s in sizes["waterfall"]}
    assert steps["no_consent"]["removed"] == 1369  # as the README's demo shows
    # the README's demo: 3,146 after suppressions, 62 in the global holdout, 3,084 listed
    assert steps["suppressed"]["left"] == 3146 and steps["global_holdout"]["removed"] == 62
    assert sizes["listed"] == sizes["treatment"] + sizes["holdout"] == 3084
    assert all(isinstance(r["co_purchase_rate"], float) for r in sizes["rules"])
    check = json.loads(run("check", "-w", str(pristine), "--json").output)
    assert check["ok"] is True and check["counts"]["customers"] == 20000
    overlap = json.loads(
        run("overlap", "SG04-101", "PC06-101", "-w", str(pristine), "--json").output
    )
    assert isinstance(overlap["sets"][0]["p_value"], float)
    estimate = json.loads(
        run("estimate", MAT, "-w", str(pristine), "--cutoffs", "3", "--json").output
    )
    assert isinstance(estimate["holdout"]["detectable_relative_uplift"], float)
    assert isinstance(estimate["expected_buyers"], float)


def test_build_json_names_its_files(sample: Path, tmp_path: Path) -> None:
    out = tmp_path / "m.csv"
    built = json.loads(
        run(
            "build",
            MAT,
            "-w",
            str(sample),
            "--no-estimate",
            "--out",
            str(out),
            "--campaign",
            "j",
            "--json",
        ).output
    )
    assert built["files"]["list"] == str(out)
    assert built["files"]["also"] == [str(tmp_path / "m.holdout.csv"), str(out) + ".json"]
    assert built["baseline_buyers"] is None and built["estimate_note"]


def test_help_is_in_the_order_of_the_work_with_an_example_each() -> None:
    import click

    from reachlist.cli import COMMANDS

    top = run("--help").output
    names = list(COMMANDS)
    assert [top.index(f"  {n} ") for n in names] == sorted(top.index(f"  {n} ") for n in names)
    assert names.index("rules") < names.index("sizes") < names.index("build")
    ctx = click.Context(main)
    for name in names:
        cmd = main.get_command(ctx, name)
        assert cmd is not None and "Example: reachlist " in (cmd.help or ""), name
        unhelped = [
            p.opts[0]
            for p in cmd.params
            if isinstance(p, click.Option) and not p.help and p.name != "help"
        ]
        assert unhelped == [], (name, unhelped)


def test_backtest_fits_80_columns_without_cutting_numbers(pristine: Path) -> None:
    result = run(
        "--width",
        "80",
        "backtest",
        MAT,
        "--cutoff",
        "2026-06-01",
        "-w",
        str(pristine),
        "--cutoffs",
        "3",
        "--top",
        "3",
    )
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert max(len(line) for line in lines) <= 80
    table = lines[: next(i for i, ln in enumerate(lines) if ln.startswith("pred.:"))]
    assert not any("\u2026" in ln for ln in table)  # no number cut with an ellipsis
    assert any(ln.startswith("combined") for ln in table)


def test_small_expected_counts_keep_a_decimal(pristine: Path) -> None:
    """A small list's expected buyers and units read as the brief writes them (one decimal
    below 10): rounded to whole numbers, a list expecting 0.4 buyers and 0.7 units read
    "0 buyers ... 1 unit" (seen on a Complete Journey list of 58 customers)."""
    res = run(
        "--width", "80", "sizes", MAT, "-w", str(pristine), "--top", "1",
        "--ordered-within", "7", "--min-audience", "0", "--campaign", "small",
    )  # fmt: skip
    assert res.exit_code == 0, res.output
    assert max(len(line) for line in res.output.splitlines()) <= 80, res.output
    screen = " ".join(res.output.split())
    baseline = re.search(r"expected without the offer\): (\S+) \((\S+)-(\S+), 90% interval", screen)
    units = re.search(r"Expected units: (\S+) \((\S+)-(\S+)\) at", screen)
    assert baseline and units, screen
    expected, low, high = (float(x.replace(",", "")) for x in baseline.groups())
    assert 0 < expected < 10 and "." in baseline.group(1)  # a small list, with its decimal
    assert low <= expected <= high
    assert all(float(x) < 10 or "." not in x for x in (*baseline.groups(), *units.groups()))
