"""Historian CSV import: layouts, units, times, quality flags, gaps, and every bad-input message.

Check values: unit definitions (0 degC = 273.15 K; 1 m^3/h = 1/3600 m^3/s; 1 % = 0.01, SI and pint) and
epoch arithmetic (2026-12-02T00:00:00Z = 1796169600 s since 1970-01-01, by date arithmetic in the test).
"""

from __future__ import annotations

from datetime import UTC, datetime

import numpy as np
import pytest
from exomap.schema.errors import ScenarioError
from exomap.schema.plantdata import read_plant_csv

EPOCH0 = datetime(2026, 12, 2, tzinfo=UTC).timestamp()

WIDE = """time,FI100 [m^3/h],TI100 [degC],TI200 [degC],LI200 [m]
2026-12-02T00:00:00Z,2.7,50.0,80.0,1.30
2026-12-02T00:00:20Z,2.7,50.1,80.1,1.30
2026-12-02T00:00:40Z,2.8,BAD,80.3,1.31
2026-12-02T00:01:00Z,2.8,50.3,80.4,1.31
2026-12-02T00:05:00Z,2.8,50.3,80.6,1.31
"""
MAP = {"FI100": "feed_flow", "TI100": "feed_temperature", "TI200": "reactor_temperature", "LI200": "level"}


def test_wide_layout_units_and_times():
    ds = read_plant_csv(WIDE, mapping=MAP)
    assert ds.layout == "wide" and ds.rows == 5
    np.testing.assert_allclose(ds.epoch_s, EPOCH0 + np.array([0, 20, 40, 60, 300]), rtol=0, atol=1e-6)
    np.testing.assert_allclose(ds.series["feed_flow"][0], 2.7 / 3600.0, rtol=1e-14)
    np.testing.assert_allclose(ds.series["reactor_temperature"][0], 353.15, rtol=1e-14)
    assert np.isnan(ds.series["feed_temperature"][2])
    assert ds.dropped_bad == {"FI100": 0, "TI100": 1, "TI200": 0, "LI200": 0}
    # 240 s after 20 s steps is a gap (more than 3 median spacings)
    assert ds.gaps == [(EPOCH0 + 60, EPOCH0 + 300)]
    assert len(ds.dataset_id) == 16
    assert ds.notes == []  # every time had its zone


def test_same_content_same_id_and_naive_times_are_utc():
    naive = WIDE.replace("Z,", ",")
    a = read_plant_csv(WIDE, mapping=MAP)
    b = read_plant_csv(naive, mapping=MAP)
    assert a.dataset_id == b.dataset_id
    assert "UTC" in " ".join(b.notes)


def test_long_layout_with_quality_and_units_in_the_mapping():
    text = "tag,time,value,quality\n"
    for k in range(4):
        text += f"TI200,{EPOCH0 + 30 * k},{80 + k},good\n"
        text += f"XV1,{EPOCH0 + 30 * k},{40 + k},{'bad' if k == 2 else 'good'}\n"
    ds = read_plant_csv(text, mapping={"TI200": "reactor_temperature", "XV1": "valve_opening"},
                        units={"TI200": "degC", "XV1": "%"})  # fmt: skip
    assert ds.layout == "long"
    np.testing.assert_allclose(ds.series["valve_opening"][[0, 1, 3]], [0.40, 0.41, 0.43], rtol=1e-14)
    assert np.isnan(ds.series["valve_opening"][2])
    assert ds.dropped_bad["XV1"] == 1
    assert "epoch" in " ".join(ds.notes)


@pytest.mark.parametrize(
    ("text", "mapping", "units", "field", "words"),
    [
        ("", MAP, None, "file", "empty"),
        ("time,TI200 [degC]\n", {"TI200": "reactor_temperature"}, None, "file", "no data"),
        (WIDE.replace("50.3,80.4", "50.3,eighty"), MAP, None, "line 5, column 4", "not a number"),
        (WIDE.replace("00:01:00Z", "00:00:10Z"), MAP, None, "line 5, column 1", "does not increase"),
        (WIDE.replace("2026-12-02T00:00:20Z", "yesterday"), MAP, None, "time", "line 3"),
        (WIDE, {**MAP, "TI200": "reactor_temperature", "LI200": "reactor_temperature"}, None, "mapping", "both mapped"),
        (WIDE, {"TI999": "reactor_temperature"}, None, "mapping.TI999", "no column"),
        (WIDE, {"TI200": "reactor_temprature"}, None, "mapping", "not a role"),
        (WIDE.replace("TI200 [degC]", "TI200 [kg]"), MAP, None, "units.TI200", "temperature"),
        (WIDE.replace("LI200 [m]", "LI200"), MAP, None, "units.LI200", "no unit"),
    ],
)
def test_bad_input_names_the_place(text, mapping, units, field, words):
    with pytest.raises(ScenarioError) as err:
        read_plant_csv(text, mapping=mapping, units=units)
    e = err.value.errors[0]
    assert e["field"].startswith(field), e
    assert words in e["message"], e


def test_a_windowed_replay_equals_the_replay_of_the_sliced_file():
    # check value: the same file cut to the window's rows (text slicing, no exomap code), read and replayed
    from exomap.core.replay import replay
    from exomap.schema import parse_scenario
    from exomap.schema.plantdata import window

    rows = [f"2026-12-02T00:{k // 3:02d}:{20 * (k % 3):02d}Z,{2.7 + 0.01 * (k % 5):.2f},{50 + 0.1 * k:.1f},"
            f"{80 + 0.05 * k:.2f},1.30\n" for k in range(40)]  # fmt: skip
    head = WIDE.splitlines(keepends=True)[0]
    ds = read_plant_csv(head + "".join(rows), mapping=MAP)
    part, info = window(ds, "2026-12-02T00:02:00Z", EPOCH0 + 500)  # records 6..25 (00:02:00 .. 00:08:20)
    assert info == {"start": "2026-12-02T00:02:00Z", "end": "2026-12-02T00:08:20Z", "records": 20,
                    "offset_s": 120.0, "whole": False}  # fmt: skip
    cut = read_plant_csv(head + "".join(rows[6:26]), mapping=MAP)
    assert part.dataset_id == cut.dataset_id
    import json
    from pathlib import Path

    import exomap.demos

    doc = json.loads((Path(exomap.demos.__file__).parent / "jacketed-first-order.json").read_text())
    sc = parse_scenario(doc).to_core()
    a, b = replay(sc, part.record()), replay(sc, cut.record())
    np.testing.assert_array_equal(a.t, b.t)
    np.testing.assert_array_equal(a.T, b.T)
    # no window: the whole dataset, itself
    assert window(ds)[0] is ds and window(ds)[1]["whole"] is True


@pytest.mark.parametrize(
    ("start", "end", "field", "words"),
    [
        ("noon", None, "start", "expected ISO 8601"),
        (None, "2026-12-02T00:06:00+01:00", "end", "not after start"),  # 23:06 the day before, in UTC
        (EPOCH0 - 1, None, "start", "before the first record"),
        (None, EPOCH0 + 301, "end", "after the last record"),
        (EPOCH0 + 61, EPOCH0 + 299, "end", "holds 0 records"),
        (True, None, "start", "not a time"),
        (None, 1e300, "end", "1e+300 s since 1970 is after the last record"),
        (-1e300, None, "start", "before the first record"),
        ("1e400", None, "start", "not a time"),
    ],
)
def test_a_bad_window_names_its_field_and_the_format(start, end, field, words):
    from exomap.schema.plantdata import window

    ds = read_plant_csv(WIDE, mapping=MAP)
    with pytest.raises(ScenarioError) as exc:
        window(ds, start, end)
    assert exc.value.field == field and words in str(exc.value), str(exc.value)


def test_the_command_line_replays_and_fits_a_window(tmp_path, capsys):
    # check value: the API's answer shape and the window's record count, counted from the file in the test
    import json

    from exomap.cli import main

    rows = [f"2026-12-02T00:{k // 3:02d}:{20 * (k % 3):02d}Z,2.7,{50 + 0.1 * k:.1f},{80 + 0.05 * k:.2f},1.30\n"
            for k in range(30)]  # fmt: skip
    path = tmp_path / "plant.csv"
    path.write_text(WIDE.splitlines(keepends=True)[0] + "".join(rows))
    maps = [a for tag, role in MAP.items() for a in ("--map", f"{tag}={role}")]
    base = ["jacketed-first-order", str(path), *maps, "--start", "2026-12-02T00:01:00Z", "--end", "2026-12-02T00:05:00"]
    assert main(["replay", *base, "--json"]) == 0
    rep = json.loads(capsys.readouterr().out)
    # 00:01:00 .. 00:05:00 at 20 s: 13 records
    assert rep["window"]["records"] == 13 and len(rep["time_s"]) == 13 and rep["dataset"]["records"] == 30
    assert main(["calibrate", *base, "--fit", "jacket.ua", "--json"]) == 0
    cal = json.loads(capsys.readouterr().out)
    assert cal["observations"] == 13 and cal["derived_from"]["end"] == "2026-12-02T00:05:00Z"
    assert main(["replay", *base[:-4], "--start", "2026-12-02T00:05:00Z", "--end", "00:01"]) == 2
    err = capsys.readouterr().err
    assert "--end" in err and "ISO 8601" in err, err
