"""The campaign brief as a manager sees it: the page loads in a real headless browser (Chromium
from the system packages) without errors, and the numbers on it equal the brief's JSON and the
campaign log's own rows."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import polars as pl
import pytest
from click.testing import CliRunner

from reachlist.campaigns import CampaignLog
from reachlist.cli import main
from reachlist.sample import KEY_SKUS
from reachlist.warehouse import Warehouse

MAT = KEY_SKUS["heated_mat"]
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMEDRIVER = shutil.which("chromedriver")


def run(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def shown_number(x: float) -> str:
    """How the page writes a count: whole from 10 on, one decimal below."""
    return f"{x:,.0f}" if abs(x) >= 10 else f"{x:,.1f}"


@pytest.fixture(scope="module")
def built(pristine: Path, tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, dict]:
    folder = tmp_path_factory.mktemp("brief")
    wh = folder / "garden.duckdb"
    shutil.copy(pristine, wh)
    result = run(
        "build",
        MAT,
        "-w",
        str(wh),
        "--out",
        str(folder / "mats.csv"),
        "--campaign",
        "brief-1",
        "--cutoffs",
        "3",
    )
    assert result.exit_code == 0, result.output
    page = folder / "brief.html"
    written = run("brief", "brief-1", "-w", str(wh), "--out", str(page))
    assert written.exit_code == 0, written.output
    data = json.loads(run("brief", "brief-1", "-w", str(wh), "--json").output)
    return wh, page, data


def test_the_brief_agrees_with_the_campaign_log(built: tuple[Path, Path, dict]) -> None:
    wh, _, data = built
    with Warehouse.open(wh, read_only=True) as db:
        log = CampaignLog(db)
        contacts = log.contacts("brief-1")
        record = log.campaign("brief-1")
    assert record is not None
    groups = dict(contacts.group_by("contact_group").len().iter_rows())
    assert data["treatment"] == groups["treatment"] and data["holdout"] == groups["holdout"]
    per_rule = contacts.filter(pl.col("contact_group") == "treatment").group_by("rule_id").len()
    assert {r["rule_id"]: r["treatment"] for r in data["rules"]} == dict(per_rule.iter_rows())
    assert data["expected_buyers"]["expected"] == record["counts"]["estimate"]["expected"]
    assert data["offer_name"] and data["rules"][0]["in_words"].startswith("bought ")


@pytest.mark.skipif(
    not (CHROMIUM and CHROMEDRIVER),
    reason="needs Chromium and ChromeDriver from the system packages "
    "(.ci/run installs chromium and chromium-driver)",
)
def test_the_page_in_a_real_browser_shows_the_json_numbers(
    built: tuple[Path, Path, dict],
) -> None:
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    from selenium.webdriver.common.by import By

    _, page, data = built
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM  # type: ignore[assignment]
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--window-size=1000,1600"):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    try:
        driver.get(page.as_uri())
        errors = [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]
        assert errors == []
        field = {
            el.get_attribute("data-field"): el.text
            for el in driver.find_elements(By.CSS_SELECTOR, "[data-field]")
        }
        assert field["campaign_id"] == "brief-1"
        assert field["treatment"] == f"{data['treatment']:,}"
        assert field["holdout"] == f"{data['holdout']:,}"
        assert field["reached"] == f"{data['reached']:,}"
        exp = data["expected_buyers"]
        assert field["expected"] == f"{exp['expected']:,.0f}"
        assert field["expected_low"] == f"{exp['low']:,.0f}"
        assert field["expected_high"] == f"{exp['high']:,.0f}"
        # the sample's campaign history gives an uplift, so the page shows what the offer adds
        offer = data["with_the_offer"]
        assert offer is not None
        assert field["incremental"] == shown_number(offer["incremental_buyers"])
        assert field["incremental_low"] == shown_number(offer["incremental_interval"][0])
        shown = [
            int(el.text.replace(",", ""))
            for el in driver.find_elements(By.CSS_SELECTOR, "[data-rule-treatment]")
        ]
        assert sum(shown) == data["treatment"]
        embedded = driver.execute_script(
            "return JSON.parse(document.getElementById('brief-data').textContent)"
        )
        assert embedded == data
        charts = driver.find_elements(By.CSS_SELECTOR, ".chart svg")
        assert len(charts) == 2 and all(c.size["width"] > 300 for c in charts)
    finally:
        driver.quit()


def test_brief_refusals_are_one_line(built: tuple[Path, Path, dict], tmp_path: Path) -> None:
    wh, page, _ = built
    exists = run("brief", "brief-1", "-w", str(wh), "--out", str(page))
    assert exists.exit_code == 2 and "already exists" in exists.output
    wrong = run("brief", "brief-1", "-w", str(wh), "--out", str(tmp_path / "b.pdf"))
    assert wrong.exit_code == 2 and ".html" in wrong.output
    unknown = run("brief", "nope", "-w", str(wh), "--json")
    assert unknown.exit_code == 2 and "no such campaign" in unknown.output
