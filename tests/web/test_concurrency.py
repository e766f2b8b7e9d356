"""Health stays answerable while a long map computes (the computation runs off the event loop).

Ordering, not timing: a job is held (thread pool) or a large map computes (process pool), health is asked for
meanwhile, and every health answer must arrive before the job finishes. Latency numbers are measured by
benchmarks/bench_load.py.
"""

from __future__ import annotations

import threading

from web_scenarios import ADIABATIC


def test_health_answers_while_a_job_runs_in_a_thread(make_client, monkeypatch) -> None:
    """Thread pool: a job that does not finish until the test says so; health must answer meanwhile."""
    from exomap.web import jobs

    release = threading.Event()
    running = threading.Event()
    real = jobs.compute

    def held(kind, sc, params):
        running.set()
        assert release.wait(timeout=60), "the test never released the job"
        return real(kind, sc, params)

    monkeypatch.setattr(jobs, "compute", held)
    client = make_client(executor="thread", workers=1)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    result: dict = {}
    worker = threading.Thread(
        target=lambda: result.setdefault("map", client.post("/api/v1/map", json={"scenario_id": sid})),
    )
    worker.start()
    assert running.wait(timeout=60)
    try:
        for _ in range(5):
            assert client.get("/api/v1/health").status_code == 200
        assert "map" not in result, "the map answered before it was released"
    finally:
        release.set()
        worker.join(timeout=120)
    assert result["map"].status_code == 200, result["map"].text


def test_health_answers_while_a_map_computes_in_a_process(make_client) -> None:
    """Process pool: every health answer arrives while a real 500 x 500 map is still computing."""
    client = make_client(executor="process", workers=1)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    # start the worker first, so the ordering below is about computing, not about starting a process
    assert client.post("/api/v1/steady", json={"scenario_id": sid}).status_code == 200
    pool = client.app.state.service.runner._processes

    map_done = threading.Event()
    result: dict = {}

    def big_map() -> None:
        result["response"] = client.post("/api/v1/map", json={"scenario_id": sid, "points": [500, 500]})
        map_done.set()

    worker = threading.Thread(target=big_map)
    worker.start()
    # the map is running once the only worker has been taken from the idle queue
    for _ in range(6000):
        if pool._idle.qsize() == 0:
            break
        threading.Event().wait(0.001)
    answered_during_map = 0
    for _ in range(5):
        assert client.get("/api/v1/health").status_code == 200
        if not map_done.is_set():
            answered_during_map += 1
    worker.join(timeout=120)
    assert result["response"].status_code == 200, result["response"].text
    assert answered_during_map == 5, "health waited for the map"


def test_a_job_past_its_budget_is_stopped_and_its_worker_replaced(make_client) -> None:
    """Process pool: a computation over budget answers 503, its worker is killed, and the next request is
    served by a replacement worker."""
    from web_helpers import assert_error

    # budget: a 1000 x 1000 map (about 2 s here with its answer; a 500 x 500 one became too fast as the core
    # got faster) is well over it, a steady state well under
    client = make_client(executor="process", workers=1, request_time_budget_s=0.5, max_map_cells=1_000_000)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    runner = client.app.state.service.runner
    runner.warm_up()  # the pool's start is not part of any request's budget
    pool = runner._processes
    (first,) = list(pool._all)
    slow = client.post("/api/v1/map", json={"scenario_id": sid, "points": [1000, 1000]})
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
