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
