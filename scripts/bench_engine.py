"""Print the reduction engine's throughput and the latency of POST /api/v1/reductions.

Usage: .venv/bin/python scripts/bench_engine.py [BASE_URL]
Without BASE_URL the endpoint is measured in-process through starlette's TestClient.
Figures only; this is not a test.
"""

from __future__ import annotations

import math
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from service.engine import parse_request, reduce, result_to_dict
from service.engine.water import density_tanaka

TRIALS = 100_000
PER_TEST = 4

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
    "specification": {"k_max": "1e-9 m/s"},
}


def bench_pure_python() -> None:
    inp = parse_request(FOUR_TRIALS)
    tests = TRIALS // PER_TEST
    start = time.perf_counter()
    for _ in range(tests):
        reduce(inp)
    elapsed = time.perf_counter() - start
    print(
        f"reduce() pure Python, {PER_TEST}-trial tests: {TRIALS / elapsed:,.0f} trials/s "
        f"({elapsed / tests * 1e6:.0f} µs per test)"
    )

    start = time.perf_counter()
    for _ in range(tests // 10):
        result_to_dict(reduce(parse_request(FOUR_TRIALS)))
    elapsed = time.perf_counter() - start
    print(f"parse + reduce + to_dict (units from text): {TRIALS / 10 / elapsed:,.0f} trials/s")


def bench_vectorised() -> None:
    """k20 of 100,000 falling-head trials at once with numpy (same formulas, §3.1 and §4.3)."""
    from service.engine.water import _H0, _H1, _RHO_STAR, _T_STAR

    rng = np.random.default_rng(1)
    h1 = rng.uniform(0.8, 1.2, TRIALS)
    h2 = h1 * rng.uniform(0.5, 0.9, TRIALS)
    dt = rng.uniform(1800, 7200, TRIALS)
    temp = rng.uniform(15, 30, TRIALS)
    a, length, area = 0.2827e-4, 0.116, 39.59e-4

    def eta(t_c: np.ndarray) -> np.ndarray:
        rho = density_tanaka(t_c)
        tr = (t_c + 273.15) / _T_STAR
        dr = rho / _RHO_STAR
        eta0 = 100 * np.sqrt(tr) / (_H0[0] + _H0[1] / tr + _H0[2] / tr**2 + _H0[3] / tr**3)
        total = sum(h * (1 / tr - 1) ** i * (dr - 1) ** j for i, j, h in _H1)
        return 1e-6 * eta0 * np.exp(dr * total)

    start = time.perf_counter()
    k_t = a * length / (area * dt) * np.log(h1 / h2)
    k20 = k_t * eta(temp) / eta(np.array(20.0))
    elapsed = time.perf_counter() - start
    assert np.all(np.isfinite(k20))
    assert np.all(k20 > 0)
    print(f"vectorised numpy batch (k_T and k20 only): {TRIALS / elapsed:,.0f} trials/s")


def bench_endpoint(base_url: str | None) -> None:
    n = 500
    if base_url:
        import httpx

        client = httpx.Client(base_url=base_url)
        where = base_url
    else:
        from fastapi import FastAPI
        from fastapi.testclient import TestClient

        from service.api.reductions import router

        app = FastAPI()
        app.include_router(router)
        client = TestClient(app)
        where = "in-process TestClient"
    for _ in range(20):
        client.post("/api/v1/reductions", json=FOUR_TRIALS)
    times = []
    for _ in range(n):
        start = time.perf_counter()
        response = client.post("/api/v1/reductions", json=FOUR_TRIALS)
        times.append(time.perf_counter() - start)
        assert response.status_code == 200, response.text
    times.sort()
    p50 = statistics.median(times) * 1000
    p95 = times[math.ceil(0.95 * n) - 1] * 1000
    print(
        f"POST /api/v1/reductions, {PER_TEST} trials, {where}: p50 {p50:.2f} ms, p95 {p95:.2f} ms"
    )


def main() -> None:
    bench_pure_python()
    bench_vectorised()
    bench_endpoint(sys.argv[1] if len(sys.argv) > 1 else None)


if __name__ == "__main__":
    main()
