"""``bellwether demo``: the whole job end to end, over HTTP, on an invented scenario.

It generates the food cooperative of :mod:`service.cli.scenario`, starts the
embedded server on a free loopback port (or uses ``--url``/``--key``), creates
an API key, uploads the CSV files it wrote, runs the profile, scores,
shortlist and forecast jobs with a progress bar each, simulates a first wave
of adopters and asks for next contacts and referral asks, then plants a ring
gaming the sign-up bonus and finds it (``demo_integrity``). It prints a
readable report, writes it as Markdown with the SVG plots into ``--out``, and
ends with the cautions every user of relationship data should read.
"""

from __future__ import annotations

import argparse
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx
import numpy as np

from service.settings import Settings

from .demo_campaigns import campaigns_story
from .demo_events import tasting_events
from .demo_integrity import integrity_story
from .scenario import STORES, generate, write_csv

__all__ = ["run_demo", "CAUTIONS"]

CAUTIONS = """\
Cautions
  * Relationship data is personal data. Use only data you are allowed to process.
  * Honour consent and opt-outs: Bellwether never proposes people whose contact
    consent is missing or refused, but it only knows the flags you upload.
  * Check data-protection and direct-marketing rules with your privacy or legal
    officer before you contact anyone.
  * Forecasts are model estimates, not promises: the reach interval describes the
    model's uncertainty, and real campaigns differ from any diffusion model."""

KITS = 25
CAP_PER_STORE = 4


class Demo:
    def __init__(self, base: str, key: str | None, out: Path, echo: Callable[[str], None] = print) -> None:
        headers = {"Authorization": f"Bearer {key}"} if key else {}
        self.http = httpx.Client(base_url=base, headers=headers, timeout=120)
        self.out = out
        self.echo = echo
        self.md: list[str] = []

    # -- output -------------------------------------------------------------------------
    def say(self, text: str = "", md: str | None = None) -> None:
        self.echo(text)
        if md is None:
            md = text.whole if isinstance(text, _Wrapped) else text
        self.md.append(md)

    def section(self, title: str) -> None:
        self.echo("")
        self.echo(title)
        self.echo("=" * len(title))
        self.md.append(f"\n## {title}\n")

    def table(self, header: list[str], rows: list[list[Any]]) -> None:
        cells = [[str(c) for c in header]] + [[_cell(c) for c in r] for r in rows]
        # The console gets cells cut to a readable width; the Markdown keeps them whole.
        short = [[c if len(c) <= 70 else c[:69] + "…" for c in r] for r in cells]
        widths = [max(len(r[i]) for r in short) for i in range(len(header))]
        for j, r in enumerate(short):
            self.echo("  " + "  ".join(c.rjust(w) if _numeric(c) else c.ljust(w) for c, w in zip(r, widths)).rstrip())
            if j == 0:
                self.echo("  " + "  ".join("-" * w for w in widths))
        self.md.append("")
        self.md.append("| " + " | ".join(cells[0]) + " |")
        self.md.append("|" + "|".join("---" for _ in header) + "|")
        self.md += ["| " + " | ".join(c.replace("|", "\\|") for c in r) + " |" for r in cells[1:]]
        self.md.append("")

    # -- HTTP ----------------------------------------------------------------------------
    def check(self, r: httpx.Response, expect: tuple[int, ...] = (200, 201, 202)) -> Any:
        if r.status_code not in expect:
            raise SystemExit(f"demo: {r.request.method} {r.request.url.path} answered {r.status_code}: {r.text[:500]}")
        return r.json() if r.headers.get("content-type", "").startswith(("application/json", "application/problem")) else r.text

    def run_job(self, gid: str, kind: str, params: dict[str, Any], label: str) -> dict[str, Any]:
        job = self.check(self.http.post(f"/v1/graphs/{gid}/jobs", json={"kind": kind, "params": params}))
        jid = job["id"]
        start = time.monotonic()
        while True:
            job = self.check(self.http.get(f"/v1/jobs/{jid}", params={"wait": 1}))
            message = job.get("progress_message") or job["status"]
            if not job.get("progress") and job["status"] in ("queued", "running") and time.monotonic() - start > 3:
                # The first job of each kind after an install compiles its kernels in the worker.
                message = "compiling (first run only, about a minute)"
            final = job["status"] in ("succeeded", "failed", "cancelled")
            _bar(label, float(job.get("progress") or 0.0), message, self.echo, final=final)
            if final:
                break
        self.echo("")
        if job["status"] != "succeeded":
            raise SystemExit(f"demo: {kind} job {jid} ended {job['status']}: {job.get('error')}")
        result: dict[str, Any] = self.check(self.http.get(f"/v1/jobs/{jid}/result"))
        result["_job_id"] = jid
        result["_seconds"] = time.monotonic() - start
        self.say(f"  ({kind} job {jid} took {result['_seconds']:.1f} s)")
        return result

    def save_plot(self, path: str, name: str) -> str | None:
        r = self.http.get(path)
        if r.status_code != 200 or "svg" not in r.headers.get("content-type", ""):
            return None
        (self.out / name).write_text(r.text, encoding="utf-8")
        return name


def _cell(c: Any) -> str:
    if isinstance(c, float):
        return f"{c:,.1f}" if abs(c) >= 10 else f"{c:.3g}"
    return str(c)


def _numeric(s: str) -> bool:
    return s.replace(",", "").replace(".", "", 1).replace("-", "", 1).isdigit()


def _bar(label: str, fraction: float, message: str, echo: Callable[[str], None], *, final: bool = False) -> None:
    n = int(round(max(0.0, min(1.0, fraction)) * 30))
    line = f"  {label:<22} [{'#' * n}{'.' * (30 - n)}] {fraction * 100:5.1f}%  {message[:44]:<44}"
    if echo is not print:
        return
    if sys.stdout.isatty():
        sys.stdout.write("\r" + line)
        sys.stdout.flush()
    elif final:
        sys.stdout.write(line.rstrip())  # a log file gets the final state only, once


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _start_server(data_dir: Path) -> tuple[subprocess.Popen[bytes], str, str]:
    """Start ``bellwether serve`` on loopback with its own data folder; create a key."""
    env = dict(os.environ, BELLWETHER_DATA_DIR=str(data_dir))
    env.pop("BELLWETHER_DATABASE_URL", None)
    env.pop("BELLWETHER_AUTH_DISABLED", None)
    cli = [sys.executable, "-m", "service.cli.main"]
    created = subprocess.run(
        cli + ["keys", "create", "--tenant", "demo", "--scopes", "read,write,admin", "--name", "demo"],
        env=env, capture_output=True, text=True, check=True,
    )
    key = created.stdout.strip().splitlines()[-1]
    port = _free_port()
    log = open(data_dir / "server.log", "wb")
    proc = subprocess.Popen(
        cli + ["serve", "--host", "127.0.0.1", "--port", str(port), "--workers", "2"],
        env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True,
    )
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 90
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise SystemExit(f"demo: the server exited early; see {data_dir / 'server.log'}")
        try:
            if httpx.get(base + "/readyz", timeout=1).status_code == 200:
                return proc, base, key
        except httpx.HTTPError:
            pass
        time.sleep(0.3)
    raise SystemExit(f"demo: the server did not become ready; see {data_dir / 'server.log'}")


def _stop(proc: subprocess.Popen[bytes]) -> None:
    try:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=30)
    except (ProcessLookupError, subprocess.TimeoutExpired):
        try:
            os.killpg(proc.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass


def run_demo(settings: Settings, args: argparse.Namespace, echo: Callable[[str], None] = print) -> int:
    out = Path(args.out).resolve()
    if out.exists():
        shutil.rmtree(out)
    out.mkdir(parents=True)
    members = args.members or 20_000
    t0 = time.monotonic()
    echo(f"Bellwether demo: an invented food cooperative of {members:,} members ({len(STORES)} stores).")
    echo(f"Everything is written to {_shown(out)}")
    sc = generate(members, seed=args.seed)
    edges_csv, nodes_csv = write_csv(sc, out / "upload")
    proc = None
    if args.url:
        base, key = args.url.rstrip("/"), args.key
    else:
        (out / "data").mkdir()
        echo("Starting the embedded server (SQLite in WAL mode, 2 worker processes) ...")
        proc, base, key = _start_server(out / "data")
    try:
        demo = Demo(base, key, out, echo)
        gid, shortlist = _story(demo, sc, edges_csv, nodes_csv)
        tasting_events(demo, sc, out / "upload", seed=args.seed)
        integrity_story(demo, sc, gid, out / "upload", seed=args.seed, shortlist=shortlist)
    finally:
        if proc is not None:
            _stop(proc)
    demo.section("Cautions")
    for line in CAUTIONS.splitlines()[1:]:
        demo.say(line)
    (out / "report.md").write_text("# Bellwether demo report\n" + "\n".join(demo.md) + "\n", encoding="utf-8")
    echo("")
    echo(f"Report: {_shown(out / 'report.md')}   Plots: {', '.join(sorted(p.name for p in out.glob('*.svg')))}")
    echo(f"Done in {time.monotonic() - t0:.0f} s.")
    return 0


def _story(d: Demo, sc: Any, edges_csv: Path, nodes_csv: Path) -> tuple[str, dict[str, Any]]:
    """The main story on the members' graph; its id and the shortlist's params (for the integrity part)."""
    ids = sc.ids
    d.section("The scenario")
    d.say(
        f"A regional food cooperative ({sc.members:,} members, {len(STORES)} neighbourhood stores) is launching home\n"
        f"delivery and has {KITS} ambassador kits. Ties come from referrals, shared households and volunteer\n"
        f"shifts; weights count interactions. The upload files are in {edges_csv.parent.name}/ beside this report."
    )
    g = d.check(d.http.post("/v1/graphs", json={"name": "cooperative members", "directed": False,
                                               "description": "invented demo data"}))
    gid = g["id"]
    with open(edges_csv, "rb") as fh:
        v1 = d.check(d.http.post(f"/v1/graphs/{gid}/versions", params={"part": "edges"}, content=fh,
                                 headers={"Content-Type": "text/csv"}))
    with open(nodes_csv, "rb") as fh:
        v2 = d.check(d.http.post(f"/v1/graphs/{gid}/versions", params={"part": "nodes", "mode": "append"},
                                 content=fh, headers={"Content-Type": "text/csv"}))
    s = v2["summary"]
    d.say(f"Uploaded: version {v1['number']} (edges) and version {v2['number']} (member attributes): "
          f"{v2['nodes']:,} people, {v2['edges']:,} ties; largest connected group holds "
          f"{s['largest_weak_share']:.0%} of people.")

    d.section("Profile (job kind: profile)")
    prof = d.run_job(gid, "profile", {}, "profile")
    pdata = prof.get("data", prof)
    for key, text in (pdata.get("readings") or {}).items():
        d.say(f"  - {key}: {text}", md=f"- **{key}**: {text}")
    plot = d.save_plot(f"/v1/jobs/{prof['_job_id']}/plots/degree_distribution.svg", "degree_distribution.svg")
    if plot:
        d.md.append(f"\n![degree distribution]({plot})\n")

    d.section("Who is central (job kind: scores)")
    # Sampled betweenness with a 0.05 additive error bound keeps the demo quick; the
    # default bound (0.01) costs 25 times the samples.
    d.run_job(gid, "scores", {"measures": ["degree", "strength", "pagerank", "betweenness", "coreness", "community"],
                              "betweenness": "sampled", "betweenness_epsilon": 0.05}, "scores")
    for measure, meaning in (("pagerank", "standing: reached by many well-placed people"),
                             ("betweenness", "brokerage: sits between groups")):
        r = d.http.get(f"/v1/graphs/{gid}/rankings", params={"measure": measure, "limit": 5})
        if r.status_code != 200:
            continue
        items = r.json().get("items", [])
        d.say(f"Top 5 by {measure} ({meaning}):")
        d.table(["rank", "member", "score", "store", "consent"],
                [[it.get("rank"), it.get("node_id"), it.get("score"), it.get("segment"),
                  "yes" if it.get("contactable") else "no"]
                 for it in items])

    d.section(f"Shortlist: {KITS} ambassador kits, at most {CAP_PER_STORE} per store (job kind: shortlist)")
    d.say("The first job that simulates campaigns compiles its kernels once after an install (about a\n"
          "minute on a small machine); later runs start at once.")
    caps = {name: CAP_PER_STORE for name, _ in STORES}
    common = {"model": "ic", "probability": {"scheme": "weighted_cascade"}, "random_seed": 11}
    shortlist = {"budget": KITS, "method": "imm", "epsilon": 0.2, "max_per_segment": caps, **common}
    sl = d.run_job(gid, "shortlist", shortlist, "shortlist (IMM)")
    sdata = sl.get("data", sl)
    seeds = [s["node_id"] for s in sdata.get("seeds", [])]
    if sdata.get("method_note"):
        d.say(_wrap(sdata["method_note"]))
    d.table(["#", "member", "store", "gain", "cumulative", "why"],
            [[i + 1, s["node_id"], s.get("segment") or "-", s.get("marginal_gain"), s.get("cumulative_reach"),
              s.get("reason", "")]
             for i, s in enumerate(sdata.get("seeds", [])[:KITS])])
    if sdata.get("marginal_gains_note"):
        d.say(_wrap(sdata["marginal_gains_note"]))
    g_ = sdata.get("guarantee", {})
    if g_:
        d.say(_wrap("Guarantee: " + str(g_.get("summary") or g_.get("approximation_formula"))))
    exp = sdata.get("expected_reach") or {}
    ev = sdata.get("evaluation") or {}
    runs = int(ev.get("simulations") or 0)
    if exp:
        d.say(f"Expected reach of the shortlist: {exp.get('mean', 0):,.0f} people (95% interval of the mean "
              f"{exp.get('ci_low', 0):,.0f} to {exp.get('ci_high', 0):,.0f}), from {runs:,} simulated campaigns.")
    d.say("")
    d.say("Is it really better than the obvious choices? Each obvious choice below follows the same rules\n"
          f"(consent, at most {CAP_PER_STORE} per store), and every list was run on the same simulated campaigns,\n"
          "so a difference comes from the people chosen, not from chance:")
    for c in sdata.get("comparisons", []):
        d.say(_wrap("  - " + c["verdict"], indent="    "), md="- " + c["verdict"])
    plot = d.save_plot(f"/v1/jobs/{sl['_job_id']}/plots/reach_curve.svg", "reach_curve.svg")
    if plot:
        d.md.append(f"\n![reach versus budget]({plot})\n")

    d.section("Where the shortlist gains, store by store (job kind: forecast)")
    top = d.http.get(f"/v1/graphs/{gid}/rankings", params={"measure": "degree", "limit": KITS, "contactable": "true"})
    baseline = [it["node_id"] for it in top.json().get("items", [])] if top.status_code == 200 else []
    best_name = f"{KITS} best-connected consenting members, any store"
    seed_sets = {"optimised shortlist": seeds} | ({best_name: baseline} if baseline else {})
    # The same random seed and number of campaigns as the shortlist's own evaluation, so the
    # shortlist's figure here is the one reported above.
    runs = runs or 2000
    fc = d.run_job(gid, "forecast", {"seed_sets": seed_sets, "simulations": runs, "min_simulations": runs,
                                     **common}, "forecast")
    fdata = fc.get("data", fc)
    forecasts = {r["name"]: r for r in fdata.get("forecasts", [])}
    rows = []
    for r in forecasts.values():
        e, p = r["expected_reach"], r.get("percentiles", {})
        rows.append([r["name"], e["mean"], f"{e['ci_low']:,.0f} to {e['ci_high']:,.0f}",
                     f"{p.get('p5', 0):,.0f} to {p.get('p95', 0):,.0f}", r.get("simulations")])
    d.table(["seed set", "expected reach", "95% interval of the mean", "90% of campaigns between", "campaigns"],
            rows)
    d.say("The interval says how sure the model is of the average; the spread of outcomes says what one\n"
          "campaign may actually see: plan with the spread.")
    for pair in (fdata.get("comparison") or {}).get("pairs", []):
        d.say(_wrap("On the same simulated campaigns: " + pair["verdict"]))
    if best_name in forecasts:
        ours = {x["segment"]: x["expected"] for x in forecasts["optimised shortlist"].get("segment_reach", [])}
        theirs = {x["segment"]: x["expected"] for x in forecasts[best_name].get("segment_reach", [])}
        kits_ours = _count_by_store(sdata.get("seeds", []))
        kits_theirs = _count_by_store(top.json().get("items", []))
        table: list[list[Any]] = []
        diffs: dict[str, int] = {}
        for name, _district in STORES:
            a, b = float(ours.get(name, 0.0)), float(theirs.get(name, 0.0))
            diffs[name] = int(round(a - b))
            table.append([name, kits_ours.get(name, 0), f"{a:,.0f}", kits_theirs.get(name, 0), f"{b:,.0f}",
                          _signed(a - b)])
        d.say("Reach per store: the optimised list spreads its kits over the stores (at most "
              f"{CAP_PER_STORE} each), while the best-connected members cluster where the busiest households and "
              "volunteer teams are.")
        d.table(["store", "kits (optimised)", "reach (optimised)", "kits (best-connected)",
                 "reach (best-connected)", "difference"], table)
        up = [n for n in sorted(diffs, key=lambda n: -diffs[n]) if diffs[n] >= 1]
        down = [n for n in sorted(diffs, key=lambda n: diffs[n]) if diffs[n] <= -1]
        d.say(_wrap(
            f"The optimised list gains in {', '.join(up[:4]) or 'no store'}"
            + (f" and gives up reach in {', '.join(down[:4])}" if down else "")
            + ": it buys reach in stores the best-connected members leave without an ambassador. "
            "Differences per store are single forecasts, not paired verdicts; the paired verdicts above "
            "are the ones to decide with."))
    for name, alt in (("segment_reach.svg", "reach per store"), ("adoption.svg", "adoption by round"),
                      ("outcomes.svg", "campaign outcomes")):
        plot = d.save_plot(f"/v1/jobs/{fc['_job_id']}/plots/{name}", name)
        if plot:
            d.md.append(f"\n![{alt}]({plot})\n")

    d.section("The same campaign on a money budget (job kind: shortlist with cost_budget)")
    kit_cost = sum(float(s.get("cost") or 0.0) for s in sdata.get("seeds", []))
    budget = round(kit_cost * 0.8)
    d.say(_wrap(
        "A cost unit is one euro of courier cost in this invented scenario: a kit costs 1.50 plus about "
        f"0.90 per kilometre from the member's store. The {KITS} kits above cost {kit_cost:,.2f}; here the "
        f"cooperative spends at most {budget:,} and lets the service choose how many kits to send."))
    cost = d.run_job(gid, "shortlist", {"cost_budget": float(budget), "method": "imm", "epsilon": 0.2,
                                        "max_per_segment": caps, **common}, f"shortlist (cost {budget})")
    cdata = cost.get("data", cost)
    spent = float(cdata.get("total_cost") or 0)
    reach = float((cdata.get("expected_reach") or {}).get("mean", 0))
    full = float(exp.get("mean", 0)) or 1.0
    d.say(_wrap(
        f"With {budget:,} cost units the shortlist has {len(cdata.get('seeds', []))} members costing "
        f"{spent:,.2f} in all, and expected reach {reach:,.0f} people, against {full:,.0f} for the {KITS} kits "
        f"costing {kit_cost:,.2f}: {100 * (1 - spent / kit_cost):.0f}% less money for "
        f"{100 * (1 - reach / full):.0f}% fewer people reached. Members close to their store are cheaper, so more "
        "of them fit."))

    d.section("First wave: next contacts and referral asks (POST next-contacts)")
    rng = np.random.default_rng(3)
    index = {s: i for i, s in enumerate(ids)}
    seed_idx = np.array([index[s] for s in seeds if s in index], dtype=np.int64)
    nbr_mask = np.isin(sc.src, seed_idx) | np.isin(sc.dst, seed_idx)
    cand = np.unique(np.concatenate((sc.src[nbr_mask], sc.dst[nbr_mask])))
    wave = np.union1d(seed_idx, cand[rng.random(cand.size) < 0.15])
    adopters = [ids[i] for i in wave.tolist()]
    d.say(f"Simulated first wave: {len(adopters)} members adopted (the {len(seeds)} ambassadors and some of their contacts).")
    # Asking is personal, so the first wave is ranked on the ties' interaction counts: a tie with w
    # interactions carries the ask with chance 1 - (1 - 0.05)^w. (Weighted cascade, used for the
    # shortlist, gives everyone whose only tie is an adopter a chance of 1: a list of equal chances.)
    asking = {"model": "ic", "probability": {"scheme": "per_interaction", "q": 0.05}, "random_seed": 11}
    nc = d.check(d.http.post(f"/v1/graphs/{gid}/next-contacts", json={"adopters": adopters, "limit": 10, **asking}))
    d.say("Next contacts: who to contact next, and which adopter should ask them. Asking is personal, so\n"
          "here a tie with w interactions carries the ask with chance 1 - (1 - 0.05)^w: household members\n"
          "and volunteers who share many shifts come before people with one referral tie. Members with an\n"
          "adopter who may ask them come first.")
    d.say(_wrap(nc.get("exposure_explained", "")))
    d.table(["member", "chance", "adopters in contact", "who should ask", "tie strength"],
            [[it["node_id"], f"{it['exposure']:.2f}", it["adopter_contacts"],
              (it.get("ask") or {}).get("node_id") or "nobody may ask: contact directly",
              f"{(it.get('ask') or {}).get('tie_strength', 0):.2f}" if it.get("ask") else "-"]
             for it in nc.get("items", [])])
    d.say("Referral asks: each adopter's list of people to invite; every person is assigned to one adopter.")
    d.say("Expected referrals: how many of an adopter's listed people the model expects to join if each is asked once.")
    ra = d.check(d.http.post(f"/v1/graphs/{gid}/next-contacts",
                             json={"adopters": adopters, "group_by": "adopter", "per_adopter": 3, "limit": 5, **asking}))
    d.table(["adopter", "ask them to refer", "expected referrals"],
            [[it["adopter"],
              ", ".join(f"{t['node_id']} ({t['exposure']:.2f})" for t in it.get("targets", [])),
              f"{it.get('expected_referrals', 0):.1f}"] for it in ra.get("groups", [])[:5]])
    campaigns_story(d, sc, gid)
    return gid, shortlist


def _count_by_store(rows: list[dict[str, Any]]) -> dict[str, int]:
    out: dict[str, int] = {}
    for r in rows:
        key = r.get("segment") or "-"
        out[key] = out.get(key, 0) + 1
    return out


def _shown(path: Path) -> str:
    """A path as the person typed it: relative to the current folder when it lies inside it."""
    try:
        return str(path.relative_to(Path.cwd()))
    except ValueError:
        return str(path)


class _Wrapped(str):
    """Console text wrapped to the terminal; ``whole`` keeps one line for the Markdown report."""

    whole: str


def _wrap(text: str, width: int = 100, indent: str = "") -> str:
    import textwrap

    out = _Wrapped("\n".join(textwrap.wrap(text, width, subsequent_indent=indent)))
    out.whole = text
    return out


def _signed(x: float) -> str:
    """A difference in whole people with its sign, never "-0"."""
    n = int(round(x))
    return f"{n:+,}" if n else "0"
