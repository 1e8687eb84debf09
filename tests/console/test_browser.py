"""The console in a real headless chromium against a live server and worker.

A small demo-like scenario (the invented cooperative of ``bellwether demo``, 300 members)
is uploaded over the API; the browser signs in, walks every page, starts a shortlist and a
forecast from the forms and waits for them, checks the network picture marks the seeds,
that a read key cannot submit a form, that another tenant's ids give the not-found page
and that the browser logged no error. Screenshots of every page go to
``$BELLWETHER_CONSOLE_SHOTS`` (default: the test's tmp folder).
"""

from __future__ import annotations

import os

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.console.browser import BROWSER_ENV, browser_or_skip, chromium, make_key
from tests.live import live_server

HOSTILE_NAME = '<img src=x onerror="document.title=1">'


@pytest.fixture(scope="module")
def site(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Any]]:
    browser_or_skip()
    from service.cli.scenario import generate, write_csv

    root = tmp_path_factory.mktemp("console")
    data = root / "data"
    data.mkdir()
    with live_server(data, workers=1, env=BROWSER_ENV) as base:
        writer = make_key(data, "coop", "read,write")
        reader = make_key(data, "coop", "read")
        stranger = make_key(data, "elsewhere", "read,write")
        edges, nodes = write_csv(generate(300, seed=3), root / "files")
        http = httpx.Client(base_url=base, headers={"Authorization": f"Bearer {writer}"}, timeout=120)
        gid = http.post("/v1/graphs", json={"name": "cooperative members", "directed": False,
                                            "description": "invented demo data"}).json()["id"]
        http.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=edges.read_bytes(),
                  headers={"Content-Type": "text/csv"}).raise_for_status()
        http.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                  content=nodes.read_bytes(), headers={"Content-Type": "text/csv"}).raise_for_status()
        http.post("/v1/graphs", json={"name": HOSTILE_NAME, "directed": True}).raise_for_status()
        jobs = [http.post(f"/v1/graphs/{gid}/jobs", json={"kind": k, "params": p}).json()["id"]
                for k, p in (("layout", {}), ("profile", {}), ("scores", {"measures": ["degree", "pagerank"]}))]
        for jid in jobs:
            assert http.get(f"/v1/jobs/{jid}", params={"wait": 60}).json()["status"] == "succeeded"
        shots = Path(os.environ.get("BELLWETHER_CONSOLE_SHOTS") or root / "shots")
        shots.mkdir(parents=True, exist_ok=True)
        yield {"base": base, "gid": gid, "writer": writer, "reader": reader, "stranger": stranger,
               "profile": jobs[1], "shots": shots, "http": http}
        http.close()


def _sign_in(driver: Any, base: str, key: str) -> None:
    from selenium.webdriver.common.by import By

    driver.get(base + "/console/sign-in")
    driver.find_element(By.ID, "key").send_keys(key)
    _submit(driver, "form button[type=submit]")
    assert driver.current_url.endswith("/console/graphs"), driver.current_url


def _shot(driver: Any, site: dict[str, Any], name: str) -> None:
    height = driver.execute_script("return document.documentElement.scrollHeight")
    width = driver.get_window_size()["width"]
    driver.set_window_size(width, min(max(int(height) + 120, 800), 4000))
    driver.save_screenshot(str(site["shots"] / f"{name}.png"))
    driver.set_window_size(width, 800)


def _wait_for(driver: Any, css: str, seconds: float = 90) -> Any:
    from selenium.webdriver.support import expected_conditions as ec
    from selenium.webdriver.support.ui import WebDriverWait

    return WebDriverWait(driver, seconds).until(ec.presence_of_element_located(("css selector", css)))


def _submit(driver: Any, css: str = "form.form button[type=submit]") -> None:
    """Send a form and wait until the next page has loaded."""
    from selenium.webdriver.support.ui import WebDriverWait

    button = driver.find_element("css selector", css)
    button.click()
    WebDriverWait(driver, 60).until(lambda _: _gone(button))


def _gone(element: Any) -> bool:
    """Whether the page moved on from ``element``. Newer chromedrivers answer a node of the
    unloaded page with "Node with given id does not belong to the document" instead of a
    stale-element error; both mean the same."""
    from selenium.common.exceptions import StaleElementReferenceException, WebDriverException

    try:
        element.is_enabled()
    except StaleElementReferenceException:
        return True
    except WebDriverException as exc:
        if "does not belong to the document" in str(exc):
            return True
        raise
    return False


def _errors(driver: Any) -> list[str]:
    return [e["message"] for e in driver.get_log("browser") if e["level"] == "SEVERE"]


def _plots_drawn(driver: Any) -> list[str]:
    """Sources of <img> plots that failed to load (naturalWidth 0)."""
    return list(driver.execute_script(
        "return Array.from(document.images).filter(i => !i.complete || i.naturalWidth === 0).map(i => i.src)"))


def test_a_growth_team_member_walks_the_console(site: dict[str, Any]) -> None:
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select

    base, gid = site["base"], site["gid"]
    with chromium() as driver:
        driver.get(base + "/console/graphs")
        assert "/console/sign-in" in driver.current_url
        _shot(driver, site, "01-sign-in")
        _sign_in(driver, base, site["writer"])
        # The hostile graph name is shown as text, never run as markup.
        assert HOSTILE_NAME in driver.find_element(By.TAG_NAME, "main").text
        assert driver.title != "1" and "<img src=x" not in driver.page_source.replace("&lt;img", "")
        _shot(driver, site, "02-networks")
        driver.find_element(By.LINK_TEXT, "cooperative members").click()
        _shot(driver, site, "03-network")
        driver.get(f"{base}/console/graphs/{gid}/versions/2")
        assert "What was uploaded" in driver.page_source
        _shot(driver, site, "04-version")
        driver.get(f"{base}/console/jobs/{site['profile']}")
        assert "in plain words" in driver.page_source and not _plots_drawn(driver)
        _shot(driver, site, "05-profile")

        # Who stands out, one person's page, next contacts for a pasted list of adopters.
        driver.get(f"{base}/console/graphs/{gid}/versions/2/rankings?measure=pagerank&contactable=yes")
        ranked = driver.find_elements(By.CSS_SELECTOR, "tbody tr td a.mono")
        assert len(ranked) == 100
        first = [a.text for a in ranked[:3]]
        _shot(driver, site, "05b-rankings")
        ranked[0].click()
        assert "Whom to introduce them to" in driver.page_source and "percentile" in driver.page_source
        _shot(driver, site, "05c-person")
        driver.get(f"{base}/console/graphs/{gid}/versions/2/next-contacts")
        driver.find_element(By.ID, "adopters").send_keys("\n".join(first))
        _submit(driver)
        assert len(driver.find_elements(By.CSS_SELECTOR, "tbody tr")) > 0
        _shot(driver, site, "05d-next-contacts")

        # Start a shortlist from the form: 6 people, at most 2 per store.
        driver.get(f"{base}/console/graphs/{gid}/start/shortlist?version=2")
        _shot(driver, site, "06-shortlist-form")
        budget = driver.find_element(By.ID, "budget")
        budget.clear()
        budget.send_keys("6")
        driver.find_element(By.ID, "max_per_segment").send_keys("2")
        Select(driver.find_element(By.ID, "method")).select_by_value("imm")
        _submit(driver)
        assert "/console/jobs/" in driver.current_url
        job_url = driver.current_url
        _shot(driver, site, "07-shortlist-running")
        _wait_for(driver, "table tbody tr td.num", 120)  # the page reloads itself once the work is done
        assert "Whom to contact, in order" in driver.page_source
        rows = driver.find_elements(By.CSS_SELECTOR, "main table:first-of-type tbody tr")
        assert len(rows) >= 6
        assert "How good is this list?" in driver.page_source and not _plots_drawn(driver)
        _shot(driver, site, "08-shortlist")
        csv_href = driver.find_element(By.PARTIAL_LINK_TEXT, "Download the list").get_attribute("href")
        cookie = {c["name"]: c["value"] for c in driver.get_cookies()}
        csv = httpx.get(csv_href, cookies=cookie)
        assert csv.status_code == 200 and csv.text.startswith("rank,node_id") and len(csv.text.splitlines()) == 7

        # The network picture with the seeds marked.
        driver.find_element(By.PARTIAL_LINK_TEXT, "See them in the network").click()
        seeds = driver.find_elements(By.CSS_SELECTOR, "figure.picture svg circle.seed")
        assert len(seeds) == 6, driver.page_source[:2000]
        driver.find_element(By.CSS_SELECTOR, "button[data-zoom=in]").click()
        _shot(driver, site, "09-picture")

        # Forecast the list from its page.
        driver.get(job_url)
        driver.find_element(By.PARTIAL_LINK_TEXT, "Forecast this list").click()
        assert driver.find_element(By.ID, "seeds").get_attribute("value").count(",") == 5
        driver.find_element(By.ID, "simulations").send_keys("500")
        _submit(driver)
        _wait_for(driver, "section.headline", 120)
        assert "On average the message reaches" in driver.page_source and not _plots_drawn(driver)
        _shot(driver, site, "10-forecast")
        driver.get(base + "/console/jobs")
        _shot(driver, site, "11-work")
        errors = _errors(driver)
        assert not errors, errors

        # Phone width: the shortlist page still reads (no sideways page scroll).
        driver.set_window_size(390, 844)
        driver.get(job_url)
        overflow = driver.execute_script("return document.documentElement.scrollWidth - window.innerWidth")
        assert overflow <= 1, overflow
        driver.save_screenshot(str(site["shots"] / "12-shortlist-phone.png"))


def test_a_read_key_cannot_start_work_and_other_tenants_see_nothing(site: dict[str, Any]) -> None:

    base, gid = site["base"], site["gid"]
    with chromium() as driver:
        _sign_in(driver, base, site["reader"])
        driver.get(f"{base}/console/graphs/{gid}/start/shortlist?version=2")
        assert "this form will be refused" in driver.page_source
        _submit(driver)
        assert "may look but not start" in driver.page_source
        _shot(driver, site, "13-read-key-refused")
        before = site["http"].get("/v1/jobs", params={"kind": "shortlist"}).json()["items"]
        _submit(driver, "form.who button")  # sign out
        assert "/console/sign-in" in driver.current_url
        _sign_in(driver, base, site["stranger"])
        for url in (f"/console/graphs/{gid}", f"/console/jobs/{site['profile']}",
                    f"/console/graphs/{gid}/versions/2/picture"):
            driver.get(base + url)
            assert "Nothing here" in driver.page_source, url
        _shot(driver, site, "14-not-found")
        assert site["http"].get("/v1/jobs", params={"kind": "shortlist"}).json()["items"] == before
        # The refusal (403) and the not-found pages (404) are reported by chromium as failed loads of
        # those pages themselves; nothing else may log an error.
        refused = f"/console/graphs/{gid}/start/shortlist - Failed to load resource: the server responded with a " \
                  "status of 403"
        errors = [e for e in _errors(driver) if refused not in e and "status of 404" not in e]
        assert not errors, errors

