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
