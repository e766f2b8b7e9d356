"""The way a computed answer travels: its encoding straight from the map's arrays, compression only for clients
across a network, the Server-Timing breakdown, and the cache's byte accounting once a gzip form is added.

Speed is measured by benchmarks/bench_http_map.py, not here; these tests hold what the faster path must keep:
the same bytes, the same document, the headers a client relies on.
"""

from __future__ import annotations

import gzip
import json
from importlib import resources

import pytest
from exomap import schema
from exomap.core.opmap import operating_map
from exomap.web.cache import AnswerCache
from exomap.web.compression import accepts_gzip, local_client
from exomap.web.jobs import Answer, dumps, map_document
from fastapi.testclient import TestClient
from web_scenarios import ADIABATIC

DEMOS = sorted(
    p.name.removesuffix(".json") for p in resources.files("exomap.demos").iterdir() if p.name.endswith(".json")
)


@pytest.mark.parametrize("demo", DEMOS)
def test_map_encoded_from_arrays_is_the_to_dict_document_byte_for_byte(demo: str) -> None:
    doc = json.loads(resources.files("exomap.demos").joinpath(f"{demo}.json").read_text(encoding="utf-8"))
    sc = schema.parse_scenario(doc).to_core()
    # a coarse map of each demo's own window, and a wide one reaching cells with no state (NaN temperatures)
    for kwargs in ({"points": (23, 17)}, {"points": (19, 11), "T_in_range": (150.0, 900.0)}):
        result = operating_map(sc, **kwargs)
        expected = dumps(result.to_dict())
        assert dumps(map_document(result)) == expected
        # and it is strict JSON whose NaN cells are null, as to_dict's None
        assert b"NaN" not in expected and b"Infinity" not in expected


def test_non_finite_cells_are_null_in_the_array_encoding() -> None:
    # analytic: the encoder must write a non-finite grid value as null, like to_dict's None
    import numpy as np

    assert dumps({"g": np.array([[1.0, np.nan], [np.inf, -np.inf]])}) == b'{"g":[[1.0,null],[null,null]]}'


@pytest.mark.parametrize(
    ("client", "headers", "local"),
    [
        (("127.0.0.1", 5000), {}, True),
        (("127.4.5.6", 5000), {}, True),
        (("::1", 5000), {}, True),
        (("::ffff:127.0.0.1", 5000), {}, True),
        (("192.0.2.7", 5000), {}, False),
        (("127.0.0.1", 5000), {"x-forwarded-for": "192.0.2.7"}, False),  # a proxy on this machine relays
        (("127.0.0.1", 5000), {"forwarded": "for=192.0.2.7"}, False),
        (("127.0.0.1", 5000), {"via": "1.1 proxy"}, False),
        (("127.0.0.1", 5000), {"x-real-ip": "192.0.2.7"}, False),
        (("testclient", 50000), {}, False),  # not an address
        (None, {}, False),
    ],
)
def test_local_client(client, headers, local) -> None:
    scope = {"type": "http", "client": client, "headers": [(k.encode(), v.encode()) for k, v in headers.items()]}
    assert local_client(scope) is local


def test_accepts_gzip() -> None:
    assert accepts_gzip({"accept-encoding": "gzip, deflate, br"})
    assert accepts_gzip({"accept-encoding": "br;q=1.0, GZIP;q=0.5"})
    assert not accepts_gzip({"accept-encoding": "gzip;q=0"})
    assert not accepts_gzip({"accept-encoding": "identity"})
    assert not accepts_gzip({})


@pytest.fixture
def local_and_remote(make_client) -> tuple[TestClient, TestClient, str]:
    """Two clients of one app: one on this machine (127.0.0.1), one across a network."""
    remote = make_client()
    local = TestClient(remote.app, client=("127.0.0.1", 40000))
    sid = remote.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    return local, remote, sid


def test_a_local_client_gets_the_answer_as_it_is_and_one_elsewhere_gets_it_gzipped_once(local_and_remote) -> None:
    local, remote, sid = local_and_remote
    body = {"scenario_id": sid, "points": [30, 30]}
    plain = local.post("/api/v1/map", json=body, headers={"Accept-Encoding": "gzip"})
    assert plain.status_code == 200, plain.text
    assert "content-encoding" not in plain.headers  # loopback: not worth compressing
    assert int(plain.headers["content-length"]) == len(plain.content)
    answer = next(v for v, _ in remote.app.state.service.cache._data.values())
    assert answer.gz is None  # nobody asked for it yet

    zipped = remote.post("/api/v1/map", json=body, headers={"Accept-Encoding": "gzip"})
    assert zipped.headers["x-exomap-cache"] == "hit"
    assert zipped.headers["content-encoding"] == "gzip"
    assert zipped.headers["vary"] == "Accept-Encoding"
    assert zipped.content == plain.content  # httpx decoded it: the same answer
    assert int(zipped.headers["content-length"]) == len(answer.gz) < len(plain.content)
    kept = answer.gz
    again = remote.post("/api/v1/map", json=body, headers={"Accept-Encoding": "gzip"})
    assert again.content == plain.content and answer.gz is kept  # compressed once, then sent as kept

    # a local request relayed by a proxy is for a client elsewhere: gzipped
    proxied = local.post("/api/v1/map", json=body, headers={"Accept-Encoding": "gzip", "X-Forwarded-For": "192.0.2.7"})
    assert proxied.headers["content-encoding"] == "gzip"
    # HEAD: the headers of the GET, no body
    url = f"/api/v1/scenarios/{sid}/map?points=30,30"
    get = remote.get(url, headers={"Accept-Encoding": "gzip"})
    head = remote.head(url, headers={"Accept-Encoding": "gzip"})
    assert head.status_code == 200 and head.content == b""
    assert head.headers["content-length"] == get.headers["content-length"]


def test_other_large_answers_to_a_local_client_are_not_compressed(local_and_remote) -> None:
    local, remote, sid = local_and_remote
    document = local.get(f"/api/v1/scenarios/{sid}", headers={"Accept-Encoding": "gzip"})
    assert len(document.content) > 1000 and "content-encoding" not in document.headers
    assert (
        remote.get(f"/api/v1/scenarios/{sid}", headers={"Accept-Encoding": "gzip"}).headers["content-encoding"]
        == "gzip"
    )


def test_a_computed_answer_says_where_its_time_went(local_and_remote) -> None:
    local, remote, sid = local_and_remote
    body = {"scenario_id": sid, "points": [20, 20]}
    first = remote.post("/api/v1/map", json=body, headers={"Accept-Encoding": "gzip"})
    phases = dict(item.strip().split(";dur=") for item in first.headers["server-timing"].split(","))
    assert list(phases) == ["dispatch", "compute", "encode", "return", "gzip", "app"]
    assert all(float(v) >= 0 for v in phases.values())
    # the parts of the server's time are within its total
    assert sum(float(phases[p]) for p in ("compute", "encode", "gzip")) <= float(phases["app"])
    repeat = remote.post("/api/v1/map", json=body)
    assert repeat.headers["x-exomap-cache"] == "hit" and "server-timing" not in repeat.headers
    # an answer of a page, a listing or an error carries none
    assert "server-timing" not in remote.get("/api/v1/scenarios").headers
    assert "server-timing" not in remote.post("/api/v1/map", json={"scenario_id": "nope"}).headers


def test_cache_counts_the_gzip_form_before_it_is_made() -> None:
    cache = AnswerCache(entries=10, max_bytes=10_000)
    a = Answer(b"x" * 4000)
    cache.put("a", a)
    assert cache.size_bytes == 5000  # the body and room for its compressed form (a quarter)
    a.gzipped()  # made later, while cached: the count does not drift
    assert gzip.decompress(a.gz) == a.body
    cache.put("b", Answer(b"y" * 4000))
    cache.put("c", Answer(b"z" * 4000))  # over 10,000 bytes: the oldest goes
    assert cache.get("a") is None and cache.size_bytes == 10_000
    cache.put("b", Answer(b"y" * 400))  # replacing an entry subtracts what it counted
    assert cache.size_bytes == 5000 + 400
    small = Answer(b"{}")
    assert len(small) == 2  # too small to be compressed: no room counted


def test_a_stored_scenario_read_once_is_prepared_from_memory_and_an_unsaved_one_is_still_unknown(client) -> None:
    service = client.app.state.service
    sid = client.post("/api/v1/scenarios", json=ADIABATIC).json()["id"]
    first = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": "40 min"})
    assert first.status_code == 200, first.text
    reads = []
    real_get = service.store.get
    service.store.get = lambda key: reads.append(key) or real_get(key)
    # a repeat with other parameters: computed (not cached), scenario from memory, no store read
    second = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": 3000})
    assert second.status_code == 200 and second.headers["x-exomap-cache"] == "miss"
    assert reads == []
    # the same question in other units is the same answer (one cache key, either way of preparing)
    again = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": "50 min"})
    assert again.headers["x-exomap-cache"] == "hit" and again.content == second.content
    # bad input found on the fast path is the usual 422 naming the field
    bad = client.post("/api/v1/steady", json={"scenario_id": sid, "residence_time": "40 kg"})
    assert bad.status_code == 422 and bad.json()["error"]["fields"][0]["field"] == "residence_time"
    # a scenario sent inline (never saved) is converted and cached too, but its id is still not a stored one
    inline = {**ADIABATIC, "title": "inline only (invented)"}
    assert client.post("/api/v1/steady", json={"scenario": inline}).status_code == 200
    from exomap import schema

    unsaved = schema.scenario_id(schema.parse_scenario(inline))
    missing = client.post("/api/v1/steady", json={"scenario_id": unsaved})
    assert missing.status_code == 404 and reads == [unsaved]
