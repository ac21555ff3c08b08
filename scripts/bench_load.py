"""Load benchmark: our routes against bare anchors, on SQLite and PostgreSQL, in one run.

    .venv/bin/python scripts/bench_load.py [--backends sqlite,postgres] [--connections 20]
        [--duration 10] [--workers 1] [--markdown /path/table.md]

For each backend: a fresh database filled by scripts/seed_bulk.py (demo + 100,000 samples),
a real uvicorn server in its own process on a free loopback port (BENCH_ANCHORS=1), and a
load generator in another process (wrk when installed, else an async httpx client) with N
concurrent connections for a bounded time. Prints requests/s and p50/p95/p99 for

  a1 constant JSON            a2 one row read by key        a3 one row inserted
  b  record a trial (auth, validation, idempotency, reduction, audit chain)
  c  the manager's queue (JSON; and the HTML page when /queue exists)
  d  a stored certificate PDF; issuing certificates one after another
  e  the live-preview reduction (POST /api/v1/reductions, 4 trials); e-page the test page's
     live preview (POST /tests/{id}/trials/preview, htmx)
  b-open  b at a fixed offered rate (--rate, open loop: requests start on a schedule, not
     when the last one answered; latency counted from the scheduled start)

and the ratios b/a3 and c/a2 against the goals (each from the N-connection rows). On
PostgreSQL b and c run again with 2 uvicorn workers ("2 workers: N.N× one worker"). Run by
hand; not a test. PostgreSQL: a new database on --pg-admin-url's server (dropped afterwards
unless --keep)."""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import itertools
import json
import os
import platform
import re
import secrets
import shutil
import socket
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from urllib.parse import urlencode

import httpx
import sqlalchemy as sa
from itsdangerous import URLSafeSerializer

ROOT = Path(__file__).resolve().parent.parent
PYTHON = sys.executable
ANCHORS = "/api/v1/bench-anchors"
WARM_UP_S = 2.0
SINGLE_TOO = ("c", "c-page", "d", "e", "e-page")
TWO_WORKERS = ("b", "c")
FOUR_TRIALS = {
    "method": "falling_head_rising_tail",
    "standard": "ASTM D5084",
    "specimen": {"length": "7.32 cm", "diameter": "7.11 cm"},
    "apparatus": {"headwater_area": "0.710 cm**2", "tailwater_area": "0.950 cm**2"},
    "saturation": [{"back_pressure": "300 kPa", "b_value": 0.96}],
    "trials": [
        {
            "head_initial": "125.0 cm",
            "duration": "1 day",
            "inflow_volume": f"{v} mL",
            "outflow_volume": f"{v - 0.2:.2f} mL",
            "temperature": "21.5 degC",
        }
        for v in (9.75, 9.60, 9.90, 9.70)
    ],
}


@dataclass
class Scenario:
    key: str
    what: str
    method: str
    paths: list[str]
    headers: dict[str, str] = field(default_factory=dict)
    body: str | None = None
    idempotent_key: bool = False
    expect: int = 200
    goal: str = ""


@dataclass
class Result:
    backend: str
    key: str
    what: str
    connections: int
    requests: int
    seconds: float
    p50_ms: float
    p95_ms: float
    p99_ms: float
    errors: int
    goal: str = ""
    verdict: str = ""
    # 1-minute load average after the run: other work on the machine shows up here.
    load: float = field(default_factory=lambda: os.getloadavg()[0])

    @property
    def rps(self) -> float:
        return self.requests / self.seconds if self.seconds else 0.0


# --- machine, databases, server ----------------------------------------------------------------


def machine_facts() -> dict[str, str]:
    cpu = "unknown"
    with Path("/proc/cpuinfo").open() as handle:
        for line in handle:
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    ram_kib = 0
    with Path("/proc/meminfo").open() as handle:
        for line in handle:
            if line.startswith("MemTotal"):
                ram_kib = int(line.split()[1])
    wrk = shutil.which("wrk")
    return {
        "nproc": str(os.cpu_count()),
        "cpu": cpu,
        "ram": f"{ram_kib / 1024 / 1024:.1f} GiB",
        "os": f"{platform.system()} {platform.release()}",
        "python": platform.python_version(),
        "sqlite": sqlite3.sqlite_version,
        "load generator": "wrk" if wrk else "httpx (async)",
    }


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def create_pg_database(admin_url: str) -> tuple[str, str]:
    name = f"seepline_bench_{secrets.token_hex(4)}"
    engine = sa.create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with engine.connect() as connection:
        connection.exec_driver_sql(f'CREATE DATABASE "{name}"')
        version = connection.exec_driver_sql("SHOW server_version").scalar_one()
    engine.dispose()
    url = sa.engine.make_url(admin_url).set(database=name)
    return url.render_as_string(hide_password=False), str(version)


def drop_pg_database(admin_url: str, url: str) -> None:
    name = sa.engine.make_url(url).database
    engine = sa.create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with engine.connect() as connection:
        connection.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
    engine.dispose()


def seed(env: dict[str, str], samples: int) -> dict[str, Any]:
    done = subprocess.run(
        [PYTHON, str(ROOT / "scripts" / "seed_bulk.py"), "--samples", str(samples)],
        env=env,
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=False,
    )
    if done.returncode != 0:
        raise SystemExit(f"seeding failed:\n{done.stderr[-4000:]}")
    facts: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return facts


def start_server(env: dict[str, str], port: int, workers: int) -> subprocess.Popen[bytes]:
    command = [
        PYTHON,
        "-m",
        "uvicorn",
        "service.main:create_app",
        "--factory",
        "--host",
        "127.0.0.1",
        "--port",
        str(port),
        "--workers",
        str(workers),
        "--no-access-log",
        "--log-level",
        "warning",
    ]
    server = subprocess.Popen(command, env=env, cwd=ROOT)
    deadline = time.monotonic() + 240  # a shared, busy machine starts slowly
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise SystemExit(f"the server exited with {server.returncode}")
        try:
            if httpx.get(f"http://127.0.0.1:{port}/healthz", timeout=2).status_code == 200:
                return server
        except httpx.HTTPError:
            pass
        time.sleep(0.2)
    stop_server(server)
    raise SystemExit("the server did not answer /healthz within 240 s")


def stop_server(server: subprocess.Popen[bytes]) -> None:
    server.terminate()
    try:
        server.wait(timeout=15)
    except subprocess.TimeoutExpired:
        server.kill()
        server.wait()


# --- load generation ------------------------------------------------------------------------------


def _lua_string(text: str) -> str:
    return "[==[" + text + "]==]"


def wrk_script(scenario: Scenario, prefix: str) -> str:
    paths = ", ".join(_lua_string(p) for p in scenario.paths)
    headers = ", ".join(
        f"[ {_lua_string(k)} ] = {_lua_string(v)}" for k, v in scenario.headers.items()
    )
    body = _lua_string(scenario.body) if scenario.body is not None else "nil"
    return f"""
local paths = {{{paths}}}
local headers = {{{headers}}}
local body = {body}
local count = #paths
local i = 0
request = function()
  i = i + 1
  {"headers['Idempotency-Key'] = '" + prefix + "' .. i" if scenario.idempotent_key else ""}
  return wrk.format("{scenario.method}", paths[(i % count) + 1], headers, body)
end
done = function(summary, latency, requests)
  local e = summary.errors
  io.write(string.format(
    "RESULT {{\\"requests\\":%d,\\"duration_us\\":%d,\\"status\\":%d,\\"socket\\":%d," ..
    "\\"p50\\":%d,\\"p95\\":%d,\\"p99\\":%d}}\\n",
    summary.requests, summary.duration, e.status, e.connect + e.read + e.write + e.timeout,
    latency:percentile(50), latency:percentile(95), latency:percentile(99)))
end
"""


def run_wrk(base: str, scenario: Scenario, connections: int, seconds: float) -> dict[str, Any]:
    prefix = f"bench-{secrets.token_hex(6)}-"
    with tempfile.NamedTemporaryFile("w", suffix=".lua", delete=False) as handle:
        handle.write(wrk_script(scenario, prefix))
        script = handle.name
    try:
        done = subprocess.run(
            [
                "wrk",
                "--threads",
                "1",
                "--connections",
                str(connections),
                "--duration",
                f"{max(1, round(seconds))}s",
                "--timeout",
                "30s",
                "--script",
                script,
                base,
            ],
            capture_output=True,
            text=True,
            check=False,
        )
    finally:
        Path(script).unlink()
    line = next((x for x in done.stdout.splitlines() if x.startswith("RESULT ")), None)
    if line is None:
        raise SystemExit(f"wrk gave no result for {scenario.key}:\n{done.stdout}\n{done.stderr}")
    raw = json.loads(line[len("RESULT ") :])
    return {
        "requests": raw["requests"],
        "seconds": raw["duration_us"] / 1e6,
        "p50_ms": raw["p50"] / 1000,
        "p95_ms": raw["p95"] / 1000,
        "p99_ms": raw["p99"] / 1000,
        "errors": raw["status"] + raw["socket"],
    }


async def _generate(spec: dict[str, Any]) -> dict[str, Any]:
    """The httpx load generator (used when wrk is not installed): N connections, each sending
    its next request when the last one answered, until the time or the count runs out."""
    paths, method, body = spec["paths"], spec["method"], spec["body"]
    counter = itertools.count()
    latencies: list[float] = []
    errors = 0
    deadline = time.perf_counter() + spec["seconds"]
    limits = httpx.Limits(max_connections=spec["connections"])
    async with httpx.AsyncClient(base_url=spec["base"], limits=limits, timeout=30) as client:

        async def connection() -> None:
            nonlocal errors
            while time.perf_counter() < deadline and len(latencies) < spec["max_requests"]:
                i = next(counter)
                headers = dict(spec["headers"])
                if spec["idempotent_key"]:
                    headers["Idempotency-Key"] = f"{spec['prefix']}{i}"
                started = time.perf_counter()
                try:
                    answer = await client.request(
                        method, paths[i % len(paths)], headers=headers, content=body
                    )
                except httpx.HTTPError:
                    errors += 1
                    continue
                latencies.append(time.perf_counter() - started)
                if answer.status_code >= 400:
                    errors += 1

        began = time.perf_counter()
        await asyncio.gather(*(connection() for _ in range(spec["connections"])))
        elapsed = time.perf_counter() - began
    return {
        "requests": len(latencies),
        "seconds": elapsed,
        **percentiles(latencies),
        "errors": errors,
    }


async def _open_loop(spec: dict[str, Any]) -> dict[str, Any]:
    """Open loop: request i starts at i / rate seconds whatever the answers before it did;
    its latency runs from that scheduled start, so a server falling behind shows in full
    (no coordinated omission)."""
    paths, rate = spec["paths"], spec["rate"]
    latencies: list[float] = []
    errors = 0
    limits = httpx.Limits(max_connections=spec["connections"])
    async with httpx.AsyncClient(base_url=spec["base"], limits=limits, timeout=30) as client:

        async def one(i: int, due: float) -> None:
            nonlocal errors
            headers = dict(spec["headers"])
            if spec["idempotent_key"]:
                headers["Idempotency-Key"] = f"{spec['prefix']}{i}"
            try:
                answer = await client.request(
                    spec["method"], paths[i % len(paths)], headers=headers, content=spec["body"]
                )
            except httpx.HTTPError:
                errors += 1
                return
            latencies.append(time.perf_counter() - due)
            if answer.status_code >= 400:
                errors += 1

        began = time.perf_counter()
        running = []
        for i in range(int(spec["seconds"] * rate)):
            due = began + i / rate
            await asyncio.sleep(max(0.0, due - time.perf_counter()))
            running.append(asyncio.create_task(one(i, due)))
        await asyncio.gather(*running)
        elapsed = time.perf_counter() - began
    return {
        "requests": len(latencies),
        "seconds": elapsed,
        **percentiles(latencies),
        "errors": errors,
    }


def run_open_loop(base: str, scenario: Scenario, rate: float, seconds: float) -> dict[str, Any]:
    spec = {
        "base": base,
        "paths": scenario.paths,
        "method": scenario.method,
        "headers": scenario.headers,
        "body": scenario.body,
        "idempotent_key": scenario.idempotent_key,
        "prefix": f"bench-open-{secrets.token_hex(6)}-",
        "connections": 500,
        "seconds": seconds,
        "rate": rate,
    }
    done = subprocess.run(
        [PYTHON, __file__, "generate-open"],
        input=json.dumps(spec),
        capture_output=True,
        text=True,
        check=True,
    )
    result: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return result


def percentiles(latencies_s: list[float]) -> dict[str, float]:
    if len(latencies_s) < 2:
        only = latencies_s[0] * 1000 if latencies_s else 0.0
        return {"p50_ms": only, "p95_ms": only, "p99_ms": only}
    cuts = statistics.quantiles([x * 1000 for x in latencies_s], n=100, method="inclusive")
    return {"p50_ms": cuts[49], "p95_ms": cuts[94], "p99_ms": cuts[98]}


def run_httpx(base: str, scenario: Scenario, connections: int, seconds: float) -> dict[str, Any]:
    spec = {
        "base": base,
        "paths": scenario.paths,
        "method": scenario.method,
        "headers": scenario.headers,
        "body": scenario.body,
        "idempotent_key": scenario.idempotent_key,
        "prefix": f"bench-{secrets.token_hex(6)}-",
        "connections": connections,
        "seconds": seconds,
        "max_requests": 200_000,
    }
    done = subprocess.run(
        [PYTHON, __file__, "generate"],
        input=json.dumps(spec),
        capture_output=True,
        text=True,
        check=True,
    )
    result: dict[str, Any] = json.loads(done.stdout.strip().splitlines()[-1])
    return result


def settle(base: str) -> None:
    """Wait until the requests a finished run left in flight are done (the load generator
    closes its connections, the server still completes what it had accepted), so runs
    never overlap. /healthz answers quickly only once the worker threads are free."""
    deadline = time.monotonic() + 60
    with httpx.Client(base_url=base, timeout=30) as client:
        while time.monotonic() < deadline:
            started = time.perf_counter()
            with contextlib.suppress(httpx.HTTPError):
                client.get("/healthz")
            if time.perf_counter() - started < 0.1:
                return
            time.sleep(0.2)


def load(
    tool: str, base: str, scenario: Scenario, connections: int, seconds: float
) -> dict[str, Any]:
    runner = run_wrk if tool == "wrk" else run_httpx
    runner(base, scenario, connections, WARM_UP_S)  # caches, pools, first-query plans
    settle(base)
    measured = runner(base, scenario, connections, seconds)
    settle(base)
    return measured


# --- the scenarios --------------------------------------------------------------------------------


def scenarios(facts: dict[str, Any], base: str, secret_key: str) -> list[Scenario]:
    tokens = facts["tokens"]
    json_type = {"Content-Type": "application/json"}
    technician = {"Authorization": f"Bearer {tokens['technician']}"}
    manager = {"Authorization": f"Bearer {tokens['manager']}"}
    low, high = facts["sample_id_range"]
    picks = [low + (i * 7919) % (high - low + 1) for i in range(5000)]
    found = [
        Scenario("a1", "constant JSON (async def)", "GET", [f"{ANCHORS}/constant"]),
        Scenario("a2", "one row read by key", "GET", [f"{ANCHORS}/samples/{n}" for n in picks]),
        Scenario(
            "a3",
            "one row inserted",
            "POST",
            [f"{ANCHORS}/rows?user_id={facts['user_id']}"],
            expect=201,
        ),
        Scenario(
            "b",
            "record a trial (POST .../trials)",
            "POST",
            [f"/api/v1/tests/{t}/trials" for t in facts["trial_test_ids"]],
            headers=technician | json_type,
            body=json.dumps(facts["trial_body"]),
            idempotent_key=True,
            expect=201,
            goal="≥ 50 % of a3",
        ),
        Scenario(
            "c",
            "queue, JSON (GET /api/v1/queue)",
            "GET",
            ["/api/v1/queue"],
            headers=manager,
            goal="p95 < 150 ms",
        ),
        Scenario(
            "d",
            "stored certificate PDF",
            "GET",
            [f"/api/v1/certificates/{facts['certificate_id']}/pdf"],
            headers=manager,
            goal="p95 < 500 ms",
        ),
        Scenario(
            "e",
            "live-preview reduction, 4 trials",
            "POST",
            ["/api/v1/reductions"],
            headers=technician | json_type,  # signed in: anonymous callers are rate-limited
            body=json.dumps(FOUR_TRIALS),
            goal="p95 < 30 ms",
        ),
    ]
    cookie = URLSafeSerializer(secret_key, salt="seepline-session").dumps(tokens["manager_session"])
    page = httpx.get(f"{base}/queue", headers={"Cookie": f"seepline_session={cookie}"})
    if page.status_code == 200 and page.headers.get("content-type", "").startswith("text/html"):
        found.insert(
            5,
            Scenario(
                "c-page",
                "queue, HTML page (GET /queue)",
                "GET",
                ["/queue"],
                headers={"Cookie": f"seepline_session={cookie}"},
                goal="p95 < 150 ms",
            ),
        )
    else:
        print(f"  (no HTML queue page yet: GET /queue answered {page.status_code}; skipped)")
    preview = _page_preview(base, cookie, facts)
    if preview is not None:
        found.append(preview)
    return found


def _page_preview(base: str, cookie: str, facts: dict[str, Any]) -> Scenario | None:
    """The test page's live preview as a browser sends it (session cookie, CSRF token, htmx)."""
    test_id = facts["trial_test_ids"][0]
    jar = {"Cookie": f"seepline_session={cookie}"}
    page = httpx.get(f"{base}/tests/{test_id}", headers=jar, timeout=30)
    found = re.search(r'name="csrf_token" value="([^"]+)"', page.text)
    if page.status_code != 200 or found is None:
        print(f"  (test page answered {page.status_code}; e-page skipped)")
        return None
    form = {f"trial.{k}": v for k, v in facts["trial_body"].items() if isinstance(v, str)}
    return Scenario(
        "e-page",
        "live preview, test page (htmx)",
        "POST",
        [f"/tests/{test_id}/trials/preview"],
        headers={
            **jar,
            "X-CSRF-Token": found.group(1),
            "HX-Request": "true",
            "Content-Type": "application/x-www-form-urlencoded",
        },
        body=urlencode(form),
        goal="p95 < 30 ms",
    )


def check_once(base: str, scenario: Scenario) -> str | None:
    """One request before the load: a scenario that does not answer as expected is skipped."""
    headers = dict(scenario.headers)
    if scenario.idempotent_key:
        headers["Idempotency-Key"] = f"bench-check-{secrets.token_hex(6)}"
    try:
        answer = httpx.request(
            scenario.method,
            base + scenario.paths[0],
            headers=headers,
            content=scenario.body,
            timeout=30,
        )
    except httpx.HTTPError as exc:
        return f"no answer ({type(exc).__name__})"
    if answer.status_code != scenario.expect:
        return f"{answer.status_code}: {answer.text[:300]}"
    return None


def issue_certificates(base: str, facts: dict[str, Any]) -> dict[str, Any]:
    """Issue certificates one after another (a reviewer's click each): render, hash, sign, store."""
    headers = {"Authorization": f"Bearer {facts['tokens']['reviewer']}"}
    latencies, errors = [], 0
    began = time.perf_counter()
    with httpx.Client(base_url=base, headers=headers, timeout=60) as client:
        for sample_id in facts["issue_sample_ids"]:
            started = time.perf_counter()
            try:
                answer = client.post(f"/api/v1/certificates/samples/{sample_id}")
            except httpx.HTTPError as exc:
                errors += 1
                print(f"  issue {sample_id}: no answer ({type(exc).__name__})")
                continue
            latencies.append(time.perf_counter() - started)
            if answer.status_code != 201:
                errors += 1
                print(f"  issue {sample_id}: {answer.status_code} {answer.text[:200]}")
    return {
        "requests": len(latencies),
        "seconds": time.perf_counter() - began,
        **percentiles(latencies),
        "errors": errors,
    }


def verdict(result: Result, anchors: dict[str, Result]) -> str:
    if result.requests == 0:
        return "MISSED (none answered in time)"
    if result.errors:
        return "errors"
    if result.key == "b":
        a3 = anchors.get("a3")
        share = result.rps / a3.rps if a3 and a3.rps else 0.0
        return "met" if share >= 0.5 else "MISSED"
    if result.key == "b-open":
        return "met" if result.p95_ms < 100 else "MISSED"
    limits = {"c": 150.0, "c-page": 150.0, "d": 500.0, "d-issue": 500.0, "e": 30.0, "e-page": 30.0}
    if result.key in limits:
        return "met" if result.p95_ms < limits[result.key] else "MISSED"
    return ""


def run_backend(backend: str, args: argparse.Namespace, tool: str) -> tuple[list[Result], str]:
    workdir = Path(tempfile.mkdtemp(prefix=f"seepline-bench-{backend}-"))
    secret_key = secrets.token_urlsafe(32)
    if backend == "sqlite":
        url, version = f"sqlite:///{workdir / 'bench.db'}", f"SQLite {sqlite3.sqlite_version}"
    else:
        url, server_version = create_pg_database(args.pg_admin_url)
        version = f"PostgreSQL {server_version}"
    env = {
        **os.environ,
        "DATABASE_URL": url,
        "ENVIRONMENT": "development",
        "SECRET_KEY": secret_key,
        "SIGNING_KEY_PATH": str(workdir / "signing_key.pem"),
        "BENCH_ANCHORS": "1",
        "ARGON2_TIME_COST": "1",
        "ARGON2_MEMORY_COST_KIB": "64",
        "PYTHONPATH": str(ROOT),
    }
    print(f"\n== {backend}: {version}; seeding {args.samples:,} samples ...", flush=True)
    results: list[Result] = []
    server = None
    try:
        facts = seed(env, args.samples)
        print(
            f"  seeded {facts['counts']['samples']:,} samples, {facts['counts']['tests']:,} "
            f"tests in {facts['seconds']} s (bulk part {facts['bulk_seconds']} s)",
            flush=True,
        )
        port = free_port()
        server = start_server(env, port, args.workers)
        base = f"http://127.0.0.1:{port}"
        anchors: dict[str, Result] = {}
        found = scenarios(facts, base, secret_key)
        # Every scenario at N connections; the reads also with one client (one manager).
        plan = [(s, args.connections) for s in found]
        plan += [(s, 1) for s in found if args.single and s.key in SINGLE_TOO]
        for scenario, connections in plan:
            settle(base)
            problem = check_once(base, scenario)
            if problem:
                print(f"  {scenario.key}: skipped, the check request answered {problem}")
                continue
            raw = load(tool, base, scenario, connections, args.duration)
            result = Result(backend, scenario.key, scenario.what, connections, **raw)
            result.goal = scenario.goal
            anchors.setdefault(scenario.key, result)
            result.verdict = verdict(result, anchors)
            results.append(result)
            print("  " + row(result), flush=True)
        raw = issue_certificates(base, facts)
        issued = Result(backend, "d-issue", "issue a certificate (POST)", 1, **raw)
        issued.goal = "p95 < 500 ms"
        issued.verdict = verdict(issued, anchors)
        results.append(issued)
        print("  " + row(issued), flush=True)
        trial = next((s for s in found if s.key == "b"), None)
        if trial is not None and args.rate:
            settle(base)
            raw = run_open_loop(base, trial, args.rate, args.duration)
            opened = Result(
                backend, "b-open", f"record a trial, open loop at {args.rate:g}/s", 0, **raw
            )
            opened.goal = f"p95 < 100 ms at {args.rate:g}/s offered"
            opened.verdict = verdict(opened, anchors)
            results.append(opened)
            print("  " + row(opened), flush=True)
        if backend == "postgres" and args.workers == 1 and args.two_workers:
            stop_server(server)
            server = start_server(env, port, 2)
            for scenario in (s for s in found if s.key in TWO_WORKERS):
                settle(base)
                raw = load(tool, base, scenario, args.connections, args.duration)
                two = Result(
                    backend,
                    f"{scenario.key}-2w",
                    f"{scenario.what}, 2 workers",
                    args.connections,
                    **raw,
                )
                results.append(two)
                print("  " + row(two), flush=True)
    finally:
        if server is not None:
            stop_server(server)
        if backend == "postgres" and not args.keep:
            drop_pg_database(args.pg_admin_url, url)
        if not args.keep:
            shutil.rmtree(workdir, ignore_errors=True)
    return results, version


# --- report ---------------------------------------------------------------------------------------

HEADER = (
    "| backend | id | what | conns | requests | req/s | p50 ms | p95 ms | p99 ms | errors "
    "| load | goal | result |\n|---|---|---|---:|---:|---:|---:|---:|---:|---:|---:|---|---|"
)


def row(r: Result) -> str:
    return (
        f"| {r.backend} | {r.key} | {r.what} | {r.connections} | {r.requests} | {r.rps:,.0f} "
        f"| {r.p50_ms:.1f} | {r.p95_ms:.1f} | {r.p99_ms:.1f} | {r.errors} | {r.load:.1f} "
        f"| {r.goal} | {r.verdict} |"
    )


def ratios(results: list[Result]) -> list[str]:
    lines = []
    for backend in dict.fromkeys(r.backend for r in results):
        got: dict[str, Result] = {}
        for r in results:  # the first row of each key: the N-connection run, not one client
            if r.backend == backend:
                got.setdefault(r.key, r)
        for ours, anchor, goal in (("b", "a3", "≥ 0.50"), ("c", "a2", ""), ("c-page", "a2", "")):
            if ours in got and anchor in got and got[anchor].rps:
                share = got[ours].rps / got[anchor].rps
                aim = f" (goal {goal})" if goal else ""
                lines.append(f"- {backend}: {ours}/{anchor} = {share:.2f}{aim}")
        for key in TWO_WORKERS:
            one, two = got.get(key), got.get(f"{key}-2w")
            if one and two and one.rps:
                aim = " (goal ≥ 1.6×)" if key == "b" else ""
                lines.append(
                    f"- {backend}: {key}, 2 workers: {two.rps / one.rps:.1f}× one worker{aim}"
                )
    return lines


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--backends", default="sqlite,postgres")
    parser.add_argument("--samples", type=int, default=100_000)
    parser.add_argument("--connections", type=int, default=20)
    parser.add_argument("--duration", type=float, default=10.0, help="seconds per endpoint")
    parser.add_argument("--workers", type=int, default=1, help="uvicorn worker processes")
    parser.add_argument(
        "--pg-admin-url", default="postgresql+psycopg://postgres@127.0.0.1:5432/postgres"
    )
    parser.add_argument("--tool", choices=("auto", "wrk", "httpx"), default="auto")
    parser.add_argument(
        "--rate", type=float, default=50.0, help="offered trials/s of the open-loop b (0: skip)"
    )
    parser.add_argument(
        "--no-two-workers",
        dest="two_workers",
        action="store_false",
        help="skip the 2-worker runs of b and c on PostgreSQL",
    )
    parser.add_argument(
        "--no-single",
        dest="single",
        action="store_false",
        help="skip the one-client runs of c, d and e",
    )
    parser.add_argument("--keep", action="store_true", help="keep the databases and files")
    parser.add_argument("--markdown", type=Path, help="also write the tables here")
    args = parser.parse_args()
    tool = args.tool
    if tool == "auto":
        tool = "wrk" if shutil.which("wrk") else "httpx"
    facts = machine_facts()
    facts["load generator"] = tool
    facts["server"] = f"uvicorn, {args.workers} worker(s), loopback, no access log"
    print("machine: " + "; ".join(f"{k} {v}" for k, v in facts.items()))
    results: list[Result] = []
    versions = []
    for backend in args.backends.split(","):
        found, version = run_backend(backend.strip(), args, tool)
        results.extend(found)
        versions.append(version)
    facts["databases"] = ", ".join(versions)
    lines = [
        "Machine: " + "; ".join(f"{k}: {v}" for k, v in facts.items()),
        "",
        HEADER,
        *(row(r) for r in results),
        "",
        "load: the machine's 1-minute load average after the run (other work running shows).",
        "",
        "Ratios to the anchors:",
        *ratios(results),
    ]
    print("\n" + "\n".join(lines))
    if args.markdown:
        args.markdown.write_text("\n".join(lines) + "\n")
    return 0


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "generate":
        print(json.dumps(asyncio.run(_generate(json.loads(sys.stdin.read())))))
        raise SystemExit(0)
    if len(sys.argv) > 1 and sys.argv[1] == "generate-open":
        print(json.dumps(asyncio.run(_open_loop(json.loads(sys.stdin.read())))))
        raise SystemExit(0)
    raise SystemExit(main())
