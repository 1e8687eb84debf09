"""Benchmark: time to first render of the console's shortlist page and network picture in headless chromium.

Run:  python -m tests.bench.bench_console [--members 20000] [--repeats 5] [--no-dblp]

Starts ``bellwether serve --workers 1`` on loopback with keys on, uploads the demo's
invented cooperative (the files ``bellwether demo`` writes: ``service.cli.scenario``) and,
when ../shared/datasets holds it, com-DBLP (317,080 authors, 1,049,866 ties; skipped with
a reason when absent). On each: a ``layout`` job (DrL above 5,000 people), a shortlist
(25 people), then in Debian's headless chromium (system chromedriver) each page is loaded
``--repeats`` times and the Navigation and Paint Timing figures are read: first contentful
paint, DOM ready and load (plots and all). Above 5,000 people the picture shows the
seeds' neighbourhood and communities as circles: the SVG's bytes are printed against the
people drawn, for the page and for ``GET .../layout.svg``.
"""

from __future__ import annotations

import argparse
import gzip
import statistics
import tempfile
import time
from pathlib import Path
from typing import Any

import httpx

from service.cli.scenario import generate, write_csv
from tests.console.browser import BROWSER_ENV, chromium, make_key
from tests.datasets import DATASETS
from tests.live import live_server

TIMING = """
const nav = performance.getEntriesByType('navigation')[0];
const paint = performance.getEntriesByType('paint').find(p => p.name === 'first-contentful-paint');
return {fcp: paint ? paint.startTime : null, dom: nav.domContentLoadedEventEnd, load: nav.loadEventEnd};
"""
PICTURE = """
const svg = document.querySelector('figure.picture svg');
return {bytes: new Blob([svg.outerHTML]).size, people: svg.querySelectorAll('circle:not(.group)').length,
        groups: svg.querySelectorAll('circle.group').length};
"""


def wait_job(http: httpx.Client, jid: str, limit: float = 3600) -> float:
    t0 = time.perf_counter()
    while time.perf_counter() - t0 < limit:
        job = http.get(f"/v1/jobs/{jid}", params={"wait": 30}).json()
        if job["status"] in ("succeeded", "failed", "cancelled"):
            assert job["status"] == "succeeded", job
            return time.perf_counter() - t0
    raise TimeoutError(jid)


def timed_page(driver: Any, url: str, repeats: int) -> dict[str, float]:
    runs = []
    for _ in range(repeats):
        driver.get(url)
        for _ in range(100):
            t = driver.execute_script(TIMING)
            if t["load"]:
                break
            time.sleep(0.05)
        runs.append(t)
    return {k: statistics.median([r[k] for r in runs if r[k] is not None] or [float("nan")])
            for k in ("fcp", "dom", "load")}


def scenario(http: httpx.Client, name: str, edges: Path, nodes: Path | None, budget: int) -> dict[str, Any]:
    gid = http.post("/v1/graphs", json={"name": name, "directed": False}).json()["id"]
    t0 = time.perf_counter()
    with open(edges, "rb") as fh:
        v = http.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=fh,
                      headers={"Content-Type": "text/csv"}).raise_for_status().json()
    if nodes is not None:
        with open(nodes, "rb") as fh:
            v = http.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"}, content=fh,
                          headers={"Content-Type": "text/csv"}).raise_for_status().json()
    upload = time.perf_counter() - t0
    lay = http.post(f"/v1/graphs/{gid}/jobs", json={"kind": "layout", "params": {}}).json()["id"]
    layout_s = wait_job(http, lay)
    params = {"budget": budget, "forecast_runs": 200, "forecast_max_runs": 1000, "evaluation_samples": 20_000}
    sl = http.post(f"/v1/graphs/{gid}/jobs", json={"kind": "shortlist", "params": params}).json()["id"]
    shortlist_s = wait_job(http, sl)
    api_svg = http.get(f"/v1/graphs/{gid}/versions/{v['number']}/layout.svg", params={"shortlist": sl}).content
    return {"gid": gid, "version": v["number"], "shortlist": sl, "people": v["nodes"], "ties": v["edges"],
            "upload_s": upload, "layout_s": layout_s, "shortlist_s": shortlist_s, "api_svg_bytes": len(api_svg),
            "method": http.get(f"/v1/jobs/{lay}/result").json()["method"]}


def dblp_csv(folder: Path) -> Path | None:
    path = DATASETS / "com-DBLP.edges.gz"
    if not path.exists():
        print(f"com-DBLP: skipped, {path} not found (../shared is outside the project)")
        return None
    out = folder / "dblp.csv"
    with gzip.open(path, "rt") as src, open(out, "w") as dst:
        dst.write("source,target\n")
        for line in src:
            if not line.startswith("#"):
                a, b = line.split()[:2]
                dst.write(f"a{a},a{b}\n")
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--members", type=int, default=20_000)
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--no-dblp", action="store_true")
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-console-"))
    edges, nodes = write_csv(generate(args.members, seed=7), tmp / "upload")
    data = tmp / "data"
    data.mkdir()
    env = {**BROWSER_ENV, "BELLWETHER_RATE_LIMIT_PER_SECOND": "0", "BELLWETHER_MAX_UPLOAD_BYTES": str(2**31)}
    with live_server(data, workers=1, env=env) as base:
        key = make_key(data, "bench", "read,write")
        http = httpx.Client(base_url=base, headers={"Authorization": f"Bearer {key}"}, timeout=600)
        cases = [("demo cooperative", edges, nodes)]
        if not args.no_dblp:
            csv = dblp_csv(tmp)
            if csv is not None:
                cases.append(("com-DBLP", csv, None))
        results = [(name, scenario(http, name, e, n, 25)) for name, e, n in cases]
        with chromium() as driver:
            driver.get(base + "/console/sign-in")
            driver.find_element("id", "key").send_keys(key)
            driver.find_element("css selector", "form button[type=submit]").click()
            time.sleep(0.5)
            for name, r in results:
                shortlist = timed_page(driver, f"{base}/console/jobs/{r['shortlist']}", args.repeats)
                url = f"{base}/console/graphs/{r['gid']}/versions/{r['version']}/picture?shortlist={r['shortlist']}"
                picture = timed_page(driver, url, args.repeats)
                driver.save_screenshot(str(tmp / f"{name}.png"))
                print(f"  (screenshot {tmp / name}.png)")
                drawn = driver.execute_script(PICTURE)
                print(f"{name}: {r['people']:,} people, {r['ties']:,} ties; upload {r['upload_s']:.1f} s, "
                      f"layout ({r['method']}) {r['layout_s']:.1f} s, shortlist job {r['shortlist_s']:.1f} s")
                print(f"  shortlist page: first contentful paint {shortlist['fcp']:.0f} ms, DOM ready "
                      f"{shortlist['dom']:.0f} ms, loaded with plots {shortlist['load']:.0f} ms "
                      f"(median of {args.repeats})")
                print(f"  network picture: first contentful paint {picture['fcp']:.0f} ms, DOM ready "
                      f"{picture['dom']:.0f} ms, loaded {picture['load']:.0f} ms (median of {args.repeats})")
                print(f"  picture SVG: {drawn['bytes']:,} bytes for {drawn['people']:,} people drawn "
                      f"({drawn['bytes'] / max(drawn['people'], 1):.0f} bytes a person) and {drawn['groups']} "
                      f"community circles; GET layout.svg {r['api_svg_bytes']:,} bytes")
        http.close()


if __name__ == "__main__":
    main()
