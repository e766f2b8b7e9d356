"""Plant data over the API: datasets stored content-addressed on both store backends, bad uploads refused
with nothing stored, the save token, and replay/overlay/calibrate answers equal to the core's own.

Check values: the core functions called directly on the same data (``exomap.core.replay.replay``), and the
dataset id (the hash of the SI content) for "the same data is the same id".
"""

from __future__ import annotations

import numpy as np
import pytest
from exomap.core.replay import replay
from exomap.schema import parse_scenario
from exomap.schema.plantdata import read_plant_csv
from exomap.web.store import DatasetStore, open_database
from test_answers import PLANT_CSV, PLANT_MAP
from web_helpers import assert_error

MAPPING = dict(p.split("=") for p in PLANT_MAP.split(","))


def test_datasets_are_content_addressed_on_both_backends(database_url, tmp_path):
    db = open_database(database_url, tmp_path / "data")
    try:
        store = DatasetStore(db)
        ds = read_plant_csv(PLANT_CSV, mapping=MAPPING)
        did, created = store.save(ds)
        assert created and did == ds.dataset_id
        assert store.save(ds) == (did, False)
        back = store.get(did)
        assert back.dataset_id == did  # the stored SI content hashes to the same id
        np.testing.assert_array_equal(back.series["reactor_temperature"], ds.series["reactor_temperature"])
        assert store.summary(did)["records"] == 30
        assert store.get("0000000000000000") is None
    finally:
        db.close()


def test_upload_replay_overlay_and_calibrate_through_http(client):
    r = client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode())
    assert r.status_code == 201, r.text
    did = r.json()["dataset_id"]
    assert r.headers["location"] == f"/api/v1/datasets/{did}"
    rep = client.post("/api/v1/replay", json={"scenario_id": "jacketed-first-order", "dataset_id": did}).json()
    ds = read_plant_csv(PLANT_CSV, mapping=MAPPING)
    sc = parse_scenario(client.get("/api/v1/scenarios/jacketed-first-order").json()).to_core()
    core = replay(sc, ds.record())
    np.testing.assert_allclose(rep["simulated"]["temperature_K"], core.T, rtol=1e-12)
    ov = client.post("/api/v1/overlay", json={"scenario_id": "jacketed-first-order", "dataset_id": did}).json()
    # residence time V_set / q: 2.7 m^3/h recorded throughout
    np.testing.assert_allclose(ov["residence_time_s"], sc.vessel.V_set / (2.7 / 3600.0), rtol=1e-12)
    cal = client.post(
        "/api/v1/calibrate",
        json={"scenario_id": "jacketed-first-order", "dataset_id": did, "fit": ["jacket.ua"]},
    ).json()
    # the calibrated scenario is a valid scenario that records where it came from
    doc = cal["scenario"]
    assert parse_scenario(doc).jacket.ua == pytest.approx(cal["estimates"][0]["value"], rel=1e-12)
    assert did in doc["description"] and cal["derived_from"]["dataset_id"] == did
    saved = client.post("/api/v1/scenarios", json=doc)
    assert saved.status_code == 201, saved.text


@pytest.mark.parametrize(
    ("csv", "params", "field"),
    [
        ("", {"map": PLANT_MAP}, "file"),
        (PLANT_CSV.replace("2.7,", "2.7x,", 1), {"map": PLANT_MAP}, "line 2, column 2"),
        (PLANT_CSV, {"map": "FI-101=feed_flow,TI-201=feed_flow"}, "mapping"),
        (PLANT_CSV, {"map": "FI-101"}, "map"),
        (PLANT_CSV, {"map": PLANT_MAP, "unit": "TI-201=K"}, "units.TI-201"),
    ],
    ids=["empty", "not-a-number", "role-twice", "no-role", "unit-disagrees"],
)
def test_bad_uploads_are_refused_and_nothing_is_stored(client, csv, params, field):
    r = client.post("/api/v1/datasets", params=params, content=csv.encode())
    assert r.status_code == 422, r.text
    body = assert_error(r, 422, r.json()["error"]["code"], None)
    assert body["fields"][0]["field"].startswith(field), body
    assert client.get(f"/api/v1/datasets/{read_plant_csv(PLANT_CSV, mapping=MAPPING).dataset_id}").status_code == 404


def test_uploads_need_the_save_token_and_respect_the_size_limit(make_client):
    client = make_client(save_token="s3cret", max_dataset_bytes=2000)
    assert_error(
        client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode()), 401, "unauthorized"
    )
    big = PLANT_CSV + PLANT_CSV[PLANT_CSV.index("\n") + 1 :] * 3
    r = client.post(
        "/api/v1/datasets", params={"map": PLANT_MAP}, content=big.encode(), headers={"Authorization": "Bearer s3cret"}
    )
    assert r.status_code == 413


def test_a_calibration_cut_short_by_the_budget_says_so_and_is_not_cached(client, monkeypatch):
    # no time left for the profiles: the estimates and linearised standard errors come back (200), the
    # intervals are not given and a warning says why; the answer is not kept, so a retry computes it again
    from exomap.web import plant

    monkeypatch.setattr(plant, "PROFILE_SHARE", 0.0)
    did = client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode()).json()["dataset_id"]
    body = {"scenario_id": "jacketed-first-order", "dataset_id": did, "fit": ["jacket.ua"]}
    r = client.post("/api/v1/calibrate", json=body)
    assert r.status_code == 200, r.text
    cal = r.json()
    assert cal["estimates"][0]["interval_95"] == [None, None]
    assert cal["estimates"][0]["standard_error"] > 0
    assert any(plant.TIMED_OUT in w and "jacket.ua" in w for w in cal["warnings"]), cal["warnings"]
    again = client.post("/api/v1/calibrate", json=body)
    assert again.headers["x-exomap-cache"] == "miss"
    # with the time back, the same request gives the profile interval, about the estimate
    monkeypatch.setattr(plant, "PROFILE_SHARE", 0.8)
    full = client.post("/api/v1/calibrate", json=body).json()
    lo, hi = full["estimates"][0]["interval_95"]
    assert lo < full["estimates"][0]["value"] < hi
    assert client.post("/api/v1/calibrate", json=body).headers["x-exomap-cache"] == "hit"


def test_a_window_replays_overlays_and_fits_only_its_records(client):
    # the window 06:05 .. 06:20 holds records 5..20 of the 30 (one a minute): the replay equals the core's replay
    # of those records alone, the answer echoes the window, and the calibration records it in its provenance
    did = client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode()).json()["dataset_id"]
    win = {"start": "2026-11-30T06:05:00Z", "end": "2026-11-30T06:20:00"}  # the end without a zone: UTC
    req = {"scenario_id": "jacketed-first-order", "dataset_id": did, **win}
    rep = client.post("/api/v1/replay", json=req).json()
    assert rep["window"] == {"start": "2026-11-30T06:05:00Z", "end": "2026-11-30T06:20:00Z", "records": 16,
                             "offset_s": 300.0, "whole": False}  # fmt: skip
    assert rep["dataset"]["records"] == 30 and rep["time_s"][0] == 0.0 and rep["time_s"][-1] == 900.0
    ds = read_plant_csv(PLANT_CSV, mapping=MAPPING)
    sc = parse_scenario(client.get("/api/v1/scenarios/jacketed-first-order").json()).to_core()
    from exomap.core.replay import PlantRecord

    sliced = PlantRecord(ds.epoch_s[5:21] - ds.epoch_s[5], {r: v[5:21] for r, v in ds.series.items()})
    np.testing.assert_allclose(rep["simulated"]["temperature_K"], replay(sc, sliced).T, rtol=1e-12)
    # epoch seconds select the same window (and share the cache entry)
    epoch = {"start": float(ds.epoch_s[5]), "end": str(ds.epoch_s[20])}
    again = client.post("/api/v1/replay", json={**req, **epoch})
    assert again.headers["x-exomap-cache"] == "hit" and again.json()["window"] == rep["window"]
    ov = client.post("/api/v1/overlay", json=req).json()
    assert ov["window"] == rep["window"] and ov["records"] == 30 and len(ov["time_s"]) == 16
    assert ov["start"] == "2026-11-30T06:05:00Z"
    # the recorded reactor temperature of record 5 is 80.3 + 0.5 degC (the CSV above)
    assert ov["reactor_temperature_K"][0] == pytest.approx(273.15 + 80.8, abs=1e-9)
    cal = client.post("/api/v1/calibrate", json={**req, "fit": ["jacket.ua"]}).json()
    assert cal["window"] == rep["window"] and cal["observations"] == 16
    assert cal["derived_from"]["dataset_id"] == did
    assert (cal["derived_from"]["start"], cal["derived_from"]["end"]) == (win["start"], "2026-11-30T06:20:00Z")
    assert "2026-11-30T06:05:00Z to 2026-11-30T06:20:00Z (16)" in cal["scenario"]["description"]
    whole = client.post("/api/v1/replay", json={"scenario_id": "jacketed-first-order", "dataset_id": did}).json()
    assert whole["window"]["whole"] is True and whole["window"]["records"] == 30


@pytest.mark.parametrize(
    ("path", "extra", "field", "words"),
    [
        ("replay", {"start": "yesterday"}, "start", "ISO 8601"),
        ("replay", {"end": "2026-11-30T06:40:00Z"}, "end", "after the last record"),
        ("overlay", {"start": "2026-11-30T05:00:00Z"}, "start", "before the first record"),
        ("replay", {"start": "2026-11-30T06:10:00Z", "end": "2026-11-30T06:05:00Z"}, "end", "not after start"),
        ("replay", {"start": "2026-11-30T06:10:00Z", "end": "2026-11-30T06:10:30Z"}, "end", "holds 1 records"),
        ("calibrate", {"start": "2026-11-30T06:10:00Z", "end": "2026-11-30T06:11:00Z"}, "end", "at least 3"),
    ],
    ids=["not-a-time", "after-data", "before-data", "end-before-start", "one-record", "too-few-to-fit"],
)
def test_a_bad_window_is_a_422_naming_the_field(client, path, extra, field, words):
    did = client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode()).json()["dataset_id"]
    body = {"scenario_id": "jacketed-first-order", "dataset_id": did, **extra}
    if path == "calibrate":
        body["fit"] = ["jacket.ua"]
    err = assert_error(client.post(f"/api/v1/{path}", json=body), 422, "invalid_request", field)
    assert words in err["message"] and err["fields"][0]["field"] == field, err


@pytest.mark.parametrize(
    ("path", "status", "code", "message"),
    [
        ("replay", 422, "no_convergence", "the replay needed more than 400000 model evaluations"),
        ("calibrate", 503, "time_budget_exceeded", "the computation took longer than the budget of 20 s"),
    ],
)
def test_too_long_for_one_computation_says_to_choose_a_window(client, monkeypatch, path, status, code, message):
    # a million records stand in: the computation fails as the evaluation cap or the time budget makes it fail
    from exomap.web.errors import ApiError, unavailable
    from exomap.web.service import Service

    async def too_long(self, *args, **kwargs):
        raise ApiError(422, code, message) if status == 422 else unavailable(code, message)

    did = client.post("/api/v1/datasets", params={"map": PLANT_MAP}, content=PLANT_CSV.encode()).json()["dataset_id"]
    monkeypatch.setattr(Service, "computed", too_long)
    body = {"scenario_id": "jacketed-first-order", "dataset_id": did, "fit": ["jacket.ua"]}
    if path == "replay":
        del body["fit"]
    err = assert_error(client.post(f"/api/v1/{path}", json=body), status, code)
    assert err["message"].startswith(message) and "the whole dataset was used: choose a window" in err["message"]
    assert "'start' and 'end'" in err["message"] and [f["field"] for f in err["fields"]] == ["start", "end"]
    # a window that is still too long: choose a shorter one
    body["end"] = "2026-11-30T06:20:00Z"
    err = assert_error(client.post(f"/api/v1/{path}", json=body), status, code)
    assert "the window held 21 records: choose a shorter window" in err["message"], err
