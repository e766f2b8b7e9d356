"""Health stays answerable while a long map computes (the computation runs off the event loop).

Ordering, not timing: a map that takes seconds is started, health is asked for while it runs, and every health
answer must arrive while the map is still running. Latency numbers are measured by benchmarks/bench_load.py.
"""

from __future__ import annotations

import threading

import pytest
from web_scenarios import ADIABATIC


@pytest.mark.parametrize("executor", ["thread", "process"])
def test_health_answers_while_a_map_computes(make_client, executor) -> None:
    client = make_client(executor=executor, workers=1)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    # start the workers first, so the ordering below is about computing, not about starting a process
    assert client.post("/api/v1/steady", json={"scenario_id": sid}).status_code == 200

    map_done = threading.Event()
    map_started = threading.Event()
    result: dict = {}

    def big_map() -> None:
        map_started.set()
        result["response"] = client.post("/api/v1/map", json={"scenario_id": sid, "points": [300, 300]})
        map_done.set()

    worker = threading.Thread(target=big_map)
    worker.start()
    map_started.wait()
    # wait until the map is really running in the pool (its job has been submitted)
    service = client.app.state.service
    for _ in range(2000):
        if service.cache.misses >= 2:
            break
        threading.Event().wait(0.001)
    answered_during_map = 0
    for _ in range(5):
        health = client.get("/api/v1/health")
        assert health.status_code == 200
        if not map_done.is_set():
            answered_during_map += 1
    worker.join(timeout=120)
    assert map_done.is_set()
    assert result["response"].status_code == 200, result["response"].text
    assert answered_during_map == 5, "health waited for the map"


def test_a_job_past_its_budget_is_stopped_and_its_worker_replaced(make_client) -> None:
    """Process pool: a computation over budget answers 503, its worker is killed, and the next request is
    served by a replacement worker."""
    from web_helpers import assert_error

    client = make_client(executor="process", workers=1, request_time_budget_s=0.5)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    assert client.post("/api/v1/steady", json={"scenario_id": sid}).status_code == 200
    pool = client.app.state.service.runner._processes
    (first,) = list(pool._all)
    slow = client.post("/api/v1/map", json={"scenario_id": sid, "points": [400, 400]})
    assert_error(slow, 503, "time_budget_exceeded")
    first.process.join(timeout=10)
    assert not first.process.is_alive(), "the worker of the stopped job is still running"
    # the replacement starts in the background (a spawned interpreter importing the core): wait for it
    for _ in range(600):
        if pool._idle.qsize() == 1:
            break
        threading.Event().wait(0.1)
    after = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": "30 min"})
    assert after.status_code == 200, after.text
    assert first not in pool._all and len(pool._all) == 1
