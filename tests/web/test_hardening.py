"""Service hardening (issue 12): strict query strings, HEAD, deep inputs, settings refused loudly.

Each test keeps one defect found by a review of the running service from coming back.
"""

from __future__ import annotations

import json

import pytest
from web_helpers import assert_error

GET_ROUTES = [
    "/api/v1/health",
    "/api/v1/version",
    "/api/v1/scenarios",
    "/api/v1/scenarios/{id}",
    "/api/v1/scenarios/{id}/steady",
    "/api/v1/scenarios/{id}/branch",
    "/api/v1/scenarios/{id}/map?points=20,20",
    "/api/v1/scenarios/{id}/check",
    "/api/v1/scenarios/{id}/simulate?duration=10 min",
    "/api/v1/openapi.json",
    "/api/docs",
    "/",
    "/scenarios/{id}",
]


# -- 4: unknown query parameters ----------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("path", "bad"),
    [
        ("/api/v1/scenarios/{id}/check?residence_tme=2220", "residence_tme"),
        ("/api/v1/scenarios/{id}/steady?residence_time=40 min&feed_temprature=300", "feed_temprature"),
        ("/api/v1/scenarios/{id}/map?point=20,20", "point"),
        ("/api/v1/scenarios/{id}/simulate?duration=1 h&event=[]", "event"),
        ("/api/v1/scenarios/{id}/branch?alng=residence_time", "alng"),
        ("/api/v1/scenarios?x=1", "x"),
        ("/api/v1/health?verbose=1", "verbose"),
    ],
)
def test_unknown_query_parameter_is_refused_by_name(client, saved_id: str, path: str, bad: str) -> None:
    err = assert_error(client.get(path.format(id=saved_id)), 422, "invalid_request", bad)
    assert "unknown query parameter" in err["fields"][0]["message"]


def test_a_parameter_given_twice_is_refused(client, saved_id: str) -> None:
    response = client.get(f"/api/v1/scenarios/{saved_id}/steady?residence_time=2400&residence_time=3000")
    assert_error(response, 422, "invalid_request", "residence_time")


def test_declared_query_parameters_still_work(client, saved_id: str) -> None:
    response = client.get(f"/api/v1/scenarios/{saved_id}/steady?residence_time=40 min&feed_temperature=300")
    assert response.status_code == 200, response.text
    # analytic: 40 min = 2400 s
    assert response.json()["operating_point"]["residence_time_s"] == 2400.0


# -- 8: HEAD -----------------------------------------------------------------------------------------------------
def test_head_answers_like_get_without_a_body(client, saved_id: str) -> None:
    for template in GET_ROUTES:
        path = template.format(id=saved_id)
        get = client.get(path, headers={"accept-encoding": "identity"})
        head = client.head(path, headers={"accept-encoding": "identity"})
        assert get.status_code == 200, (path, get.text[:200])
        assert head.status_code == 200, (path, head.status_code)
        assert head.content == b"", path
        assert head.headers["content-type"] == get.headers["content-type"], path
        if "content-length" in get.headers:
            assert head.headers["content-length"] == get.headers["content-length"], path


def test_head_on_a_post_only_route_is_405(client) -> None:
    response = client.head("/api/v1/steady")
    assert response.status_code == 405
    assert response.content == b""


# -- 5: no 500s --------------------------------------------------------------------------------------------------
def test_deeply_nested_events_query_is_a_422(client, saved_id: str) -> None:
    deep = "[" * 3000 + "]" * 3000
    response = client.get(f"/api/v1/scenarios/{saved_id}/simulate", params={"events": deep})
    assert_error(response, 422, "invalid_request", "events")


def test_deeply_nested_body_is_a_400(client) -> None:
    deep = "[" * 3000 + "]" * 3000
    body = ('{"scenario_id": "jacketed-first-order", "events": ' + deep + "}").encode()
    response = client.post("/api/v1/simulate", content=body, headers={"content-type": "application/json"})
    assert_error(response, 400, "bad_request")


def test_moderately_nested_events_name_the_event(client, saved_id: str) -> None:
    nested = "[" * 500 + "]" * 500
    body = {"scenario_id": saved_id, "duration": "1 h", "events": json.loads(nested)}
    assert_error(client.post("/api/v1/simulate", json=body), 422, "invalid_input", "events[0]")


def test_a_worker_killed_mid_job_is_a_retryable_503(make_client) -> None:
    """Process pool: kill -9 the worker while it computes; the answer is 503 worker_lost with Retry-After, and
    the next request is served by the replacement worker."""
    import os
    import signal
    import threading
    import time

    from web_scenarios import ADIABATIC

    client = make_client(executor="process", workers=1, max_map_cells=1_000_000)
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    runner = client.app.state.service.runner
    runner.warm_up()
    pool = runner._processes
    (worker,) = list(pool._all)
    result: dict = {}
    job = threading.Thread(
        target=lambda: result.setdefault(
            "r", client.post("/api/v1/map", json={"scenario_id": sid, "points": [1000, 1000]})
        )
    )
    job.start()
    deadline = time.monotonic() + 30
    while pool._idle.qsize() and time.monotonic() < deadline:  # the job has taken the only worker
        time.sleep(0.005)
    os.kill(worker.process.pid, signal.SIGKILL)
    job.join(timeout=60)
    err = assert_error(result["r"], 503, "worker_lost")
    assert "try again" in err["message"]
    assert int(result["r"].headers["retry-after"]) > 0
    deadline = time.monotonic() + 120
    while pool._idle.qsize() < 1 and time.monotonic() < deadline:
        time.sleep(0.1)
    after = client.post("/api/v1/steady", json={"scenario_id": sid})
    assert after.status_code == 200, after.text


# -- 9: Host check (DNS rebinding) ------------------------------------------------------------------------------
def test_default_hosts_are_the_loopback_names_and_the_bound_address(make_client) -> None:
    client = make_client(allowed_hosts=[], host="127.0.0.2")
    for host in ("localhost", "localhost:8000", "127.0.0.1:8000", "[::1]:8000", "LOCALHOST", "127.0.0.2:80"):
        assert client.get("/api/v1/health", headers={"host": host}).status_code == 200, host
    for host in ("attacker.example", "attacker.example:8000", "127.0.0.1.attacker.example", "", "localhost.:8000"):
        response = client.get("/api/v1/health", headers={"host": host})
        err = assert_error(response, 400, "host_not_allowed")
        assert "EXOMAP_ALLOWED_HOSTS" in err["message"]
    # pages and saves too, not only the API
    assert_error(client.get("/", headers={"host": "attacker.example"}), 400, "host_not_allowed")


def test_configured_hosts_replace_the_defaults(make_client) -> None:
    client = make_client(allowed_hosts=["exomap.plant.example"])
    assert client.get("/api/v1/health", headers={"host": "exomap.plant.example:8443"}).status_code == 200
    assert_error(client.get("/api/v1/health", headers={"host": "localhost"}), 400, "host_not_allowed")
    anyone = make_client(allowed_hosts=["*"])
    assert anyone.get("/api/v1/health", headers={"host": "whatever.example"}).status_code == 200


def test_allowed_hosts_from_the_environment(monkeypatch) -> None:
    from exomap.web.settings import Settings

    monkeypatch.setenv("EXOMAP_ALLOWED_HOSTS", "exomap.plant.example, 10.0.0.5")
    assert Settings().allowed_hosts == ["exomap.plant.example", "10.0.0.5"]
