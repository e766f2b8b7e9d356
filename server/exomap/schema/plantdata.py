"""Plant data: historian exports (CSV) read into SI series of named roles (DESIGN.md §12).

Two layouts, told apart by the header:

* **wide**: a time column and one column per tag; units in the header as ``name [unit]`` (``TI101 [degC]``)
  or given in the mapping;
* **long**: columns ``tag``, ``time``, ``value`` and optionally ``quality`` (one row per sample of one tag).

A mapping names the role of each tag: ``feed_flow``, ``feed_temperature``, ``coolant_temperature``,
``feed_concentration.X``, ``reactor_temperature``, ``level``, ``valve_opening``, ``outlet_flow``. Times are ISO
8601 (a time without a zone is read as UTC, and the answer says so) or epoch seconds. CSV and time parsing is
pandas' (``read_csv``, ``to_datetime``), the well-kept library for this; units go through the schema layer's
pint registry (``exomap.schema.quantity``), so ``degC``, ``m^3/h``, ``%`` and ``mol/L`` mean what they mean
in a scenario.

Rules
-----
* A value flagged bad is dropped and counted: a long-layout ``quality`` other than good (``good``, ``ok``,
  ``192``, ``1``, ``true`` or empty), or, in either layout, an empty cell or a historian's bad-value word
  (``BAD_WORDS``). Any other text where a number belongs is an error naming its line and column.
* Record times must increase (per tag in the long layout); a time going backwards is an error naming its line.
* Gaps (an interval over ``GAP_FACTOR`` times the median spacing) and irregular sampling are reported.
"""

from __future__ import annotations

import hashlib
import io
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from exomap.schema.errors import ScenarioError

ROLE_DIMENSIONS = {
    "feed_flow": "flow",
    "feed_temperature": "temperature",
    "coolant_temperature": "temperature",
    "reactor_temperature": "temperature",
    "level": "length",
    "valve_opening": "fraction",
    "outlet_flow": "flow",
}
INPUT_ROLES = ("feed_flow", "feed_temperature", "coolant_temperature")
OUTPUT_ROLES = ("reactor_temperature", "level", "valve_opening", "outlet_flow")
ROLES_HELP = ", ".join([*ROLE_DIMENSIONS, "feed_concentration.X"])
#: Words historians write for a value that is not a good measurement (case-insensitive).
BAD_WORDS = frozenset(
    {"", "bad", "nan", "null", "none", "n/a", "#n/a", "na", "---", "error", "i/o timeout", "no data", "shutdown"}
)
#: The same words as pandas reads them (its missing-value match is case-sensitive): lower, upper, title case.
BAD_VALUES = frozenset(v for w in BAD_WORDS for v in (w, w.upper(), w.title()))
GOOD_QUALITY = frozenset({"", "good", "ok", "192", "1", "true", "g"})
#: An interval longer than this many median spacings is a gap.
GAP_FACTOR = 3.0
_HEADER_UNIT = re.compile(r"^\s*(?P<name>.*?)\s*\[(?P<unit>[^\]]*)\]\s*$")


def _fail(field_name: str, message: str) -> ScenarioError:
    return ScenarioError.single(field_name, message)


def role_dimension(role: str) -> str:
    """The dimension of a role's values; ``ScenarioError`` naming the role if it is unknown."""
    if role.startswith("feed_concentration."):
        if len(role) > len("feed_concentration."):
            return "concentration"
    elif role in ROLE_DIMENSIONS:
        return ROLE_DIMENSIONS[role]
    raise _fail("mapping", f"{role!r} is not a role; roles: {ROLES_HELP}")


@dataclass(frozen=True, eq=False)
class Dataset:
    """Plant data in SI: record times and one series per role.

    Attributes
    ----------
    epoch_s : ndarray  record times, seconds since 1970-01-01 UTC
    series : dict  role -> SI values at ``epoch_s`` (NaN where missing or flagged bad)
    tags : dict  role -> the tag it came from
    units : dict  role -> the unit the tag was written in
    rows : int  data rows read
    dropped_bad : dict  tag -> values dropped as flagged bad
    gaps : list of (start_epoch_s, end_epoch_s)
    median_step_s : float
    irregular : bool  the spacing varies by more than 10 % around its median
    notes : list of str  what the reader assumed (times without a zone read as UTC, ...)
    """

    epoch_s: np.ndarray
    series: dict[str, np.ndarray]
    tags: dict[str, str]
    units: dict[str, str]
    rows: int
    dropped_bad: dict[str, int]
    gaps: list[tuple[float, float]]
    median_step_s: float
    irregular: bool
    layout: str
    notes: list[str] = field(default_factory=list)

    @property
    def dataset_id(self) -> str:
        """16 hex digits of the SHA-256 of the canonical content (times and SI series, roles sorted)."""
        h = hashlib.sha256()
        h.update(np.ascontiguousarray(self.epoch_s, dtype="<f8").tobytes())
        for role in sorted(self.series):
            h.update(role.encode("utf-8") + b"\0")
            h.update(np.ascontiguousarray(self.series[role], dtype="<f8").tobytes())
        return h.hexdigest()[:16]

    def record(self) -> Any:
        """The core's ``PlantRecord`` (times from the first record)."""
        from exomap.core.replay import PlantRecord

        return PlantRecord(self.epoch_s - self.epoch_s[0], dict(self.series))

    def canonical_csv(self) -> str:
        """The dataset in SI as CSV (``time_s`` since epoch, one column per role): what the store keeps."""
        roles = sorted(self.series)
        cols = [self.epoch_s] + [self.series[r] for r in roles]
        out = io.StringIO()
        out.write(",".join(["time_s", *roles]) + "\n")
        for row in zip(*(c.tolist() for c in cols), strict=True):
            out.write(",".join("" if not math.isfinite(v) else repr(v) for v in row) + "\n")
        return out.getvalue()

    def summary(self) -> dict[str, Any]:
        from datetime import UTC, datetime

        def iso(s: float) -> str:
            return datetime.fromtimestamp(s, tz=UTC).isoformat().replace("+00:00", "Z")

        return {
            "dataset_id": self.dataset_id,
            "layout": self.layout,
            "rows": self.rows,
            "records": int(self.epoch_s.size),
            "start": iso(float(self.epoch_s[0])),
            "end": iso(float(self.epoch_s[-1])),
            "duration_s": float(self.epoch_s[-1] - self.epoch_s[0]),
            "roles": {
                r: {"tag": self.tags[r], "unit": self.units[r], "values": int(np.isfinite(v).sum())}
                for r, v in sorted(self.series.items())
            },  # fmt: skip
            "dropped_bad": dict(self.dropped_bad),
            "gaps": [{"start": iso(a), "end": iso(b), "length_s": b - a} for a, b in self.gaps],
            "gap_times": [{"start_s": a, "end_s": b} for a, b in self.gaps],
            "median_step_s": self.median_step_s,
            "irregular_sampling": self.irregular,
            "notes": list(self.notes),
        }


def _si_map(unit: str, dimension: str, where: str) -> tuple[float, float]:
    """(a, b) with SI = a + b * value for a value written in ``unit`` (affine: degC and degF have offsets)."""
    from exomap.schema.quantity import QuantityProblem, to_si

    unit = unit.strip()
    if dimension == "fraction" and unit in ("", "-", "1"):
        return 0.0, 1.0
    if dimension in ("temperature",) and unit in ("°C", "C"):
        unit = "degC"
    if dimension in ("temperature",) and unit in ("°F", "F"):
        unit = "degF"
    try:
        a = to_si(f"0 {unit}", dimension)
        b = to_si(f"1 {unit}", dimension) - a
    except QuantityProblem as exc:
        raise _fail(where, f"unit {unit!r}: {exc}") from None
    return a, b


def _times(values: Any, where: str, first_line: int) -> tuple[np.ndarray, list[str]]:
    """Epoch seconds of a column of ISO 8601 strings or numbers; error naming the first bad line."""
    import pandas as pd

    notes: list[str] = []
    s = pd.Series(values)
    first = str(s.iloc[0]).strip()
    try:
        float(first)
        looks_numeric = True
    except ValueError:
        looks_numeric = False
    if looks_numeric:
        numeric = pd.to_numeric(s, errors="coerce")
        if numeric.notna().all():
            return numeric.to_numpy(dtype=float), ["times are epoch seconds"]
    text = s.astype(str).str.strip()
    parsed = pd.to_datetime(text, format="ISO8601", errors="coerce", utc=True)
    bad = parsed.isna().to_numpy()
    if bad.any():
        k = int(np.argmax(bad))
        raise _fail(where, f"line {first_line + k}: {text.iloc[k]!r} is not a time; expected ISO 8601 "
                           "(2026-12-02T08:00:00Z) or epoch seconds")  # fmt: skip
    # the zone is looked for on the first and last thousand records (an export writes every time alike)
    sample = pd.concat([text.iloc[:1000], text.iloc[-1000:]])
    zoned = sample.str.contains(r"(?:Z|[+-]\d\d:?\d\d)$", regex=True)
    if not zoned.all():
        notes.append("times without a time zone were read as UTC")
    # seconds since the epoch whatever resolution pandas chose for the parsed times
    seconds = (parsed - pd.Timestamp(0, tz="UTC")) / pd.Timedelta(seconds=1)
    return seconds.to_numpy(dtype=float), notes


def _numbers(col: Any, tag: str, line0: int, column: int) -> tuple[np.ndarray, int]:
    """Floats of a column, NaN where flagged bad (counted); error naming line and column for other text."""
    import pandas as pd

    s = pd.Series(col)
    if s.dtype.kind == "f":
        # read as numbers already (bad-value words became NaN): the fast path of a clean column
        values = s.to_numpy(dtype=float)
        return values, int(np.isnan(values).sum())
    num = pd.to_numeric(s, errors="coerce")
    missing = num.isna().to_numpy()
    if missing.any():
        words = s[missing].astype(str).str.strip().str.lower()
        flagged = words.isin(BAD_WORDS) | s[missing].isna()
        if not flagged.all():
            k = int(np.nonzero(missing)[0][int(np.argmax(~flagged.to_numpy()))])
            raise _fail(f"line {line0 + k}, column {column}", f"{str(s.iloc[k])!r} in {tag!r} is not a number")
    values = num.to_numpy(dtype=float)
    if np.any(np.isinf(values)):
        k = int(np.argmax(np.isinf(values)))
        raise _fail(f"line {line0 + k}, column {column}", f"{tag!r}: infinite value")
    return values, int(missing.sum())


def _check_mapping(mapping: Mapping[str, str]) -> dict[str, str]:
    """tag -> role checked: known roles, no role twice."""
    by_role: dict[str, str] = {}
    for tag, role in mapping.items():
        role_dimension(role)
        if role in by_role:
            raise _fail(
                "mapping", f"tags {by_role[role]!r} and {tag!r} are both mapped to {role}; map one tag per role"
            )
        by_role[role] = tag
    return dict(mapping)


def read_plant_csv(
    data: str | bytes,
    *,
    mapping: Mapping[str, str],
    time_column: str | None = None,
    units: Mapping[str, str] | None = None,
    max_rows: int = 2_000_000,
) -> Dataset:
    """Read a historian CSV export into a ``Dataset``.

    Parameters
    ----------
    data : str or bytes
        The CSV text (UTF-8).
    mapping : dict
        Tag -> role (``ROLE_DIMENSIONS`` or ``feed_concentration.X``).
    time_column : str, optional
        Wide layout: the time column (default: a column named ``time``/``timestamp``, else the first).
    units : dict, optional
        Tag -> unit, for tags whose header carries none (the header wins over nothing, the mapping over
        nothing; both given and different is an error).
    max_rows : int
        Most data rows accepted.

    Raises
    ------
    ScenarioError
        One message naming the line and column, the tag or the mapping.
    """
    import pandas as pd

    if isinstance(data, bytes):
        try:
            data = data.decode("utf-8-sig")
        except UnicodeDecodeError:
            raise _fail("file", "the file is not UTF-8 text") from None
    if not data.strip():
        raise _fail("file", "the file is empty")
    mapping = _check_mapping(mapping)
    if not mapping:
        raise _fail("mapping", "map at least one tag to a role, e.g. TI101=reactor_temperature")
    units = dict(units or {})
    # the header first, so the text columns (time, tag, quality) are read as text and every other column by
    # pandas' C float parser, with the historians' bad-value words as missing values
    try:
        head = pd.read_csv(io.StringIO(data), nrows=0, skipinitialspace=True)
    except pd.errors.EmptyDataError:
        raise _fail("file", "the file is empty") from None
    except pd.errors.ParserError as exc:
        raise _fail("file", f"the CSV cannot be read: {exc}") from None
    header = [str(c).strip() for c in head.columns]
    lower = [c.lower() for c in header]
    long = {"tag", "time", "value"} <= set(lower)
    text_cols = {"tag", "time", "quality"} if long else {"time", "timestamp", "date_time", "datetime"}
    dtypes = {c: str for c, lc in zip(head.columns, lower, strict=True) if lc in text_cols}
    if not long:
        names = [(_HEADER_UNIT.match(h).group("name") if _HEADER_UNIT.match(h) else h) for h in header]  # type: ignore[union-attr]
        t_name = time_column if time_column in names else None
        if t_name is not None:
            dtypes[head.columns[names.index(t_name)]] = str
        elif not dtypes and len(head.columns):
            dtypes[head.columns[0]] = str
    try:
        df = pd.read_csv(
            io.StringIO(data),
            dtype=dtypes,
            na_values=sorted(BAD_VALUES),
            keep_default_na=False,
            skipinitialspace=True,
            low_memory=False,
        )
    except pd.errors.ParserError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise _fail(f"line {m.group(1)}" if m else "file", f"the CSV cannot be read: {exc}") from None
    except pd.errors.EmptyDataError:
        raise _fail("file", "the file is empty") from None
    if len(df) == 0:
        raise _fail("file", "the file has a header but no data rows")
    if len(df) > max_rows:
        raise _fail("file", f"{len(df)} rows; the limit is {max_rows}")
    if long:
        return _long(df, header, lower, mapping, units)
    return _wide(df, header, mapping, units, time_column)


def _unit_of(tag: str, header_unit: str | None, units: Mapping[str, str]) -> str:
    given = units.get(tag)
    if header_unit is not None and given is not None and header_unit.strip() != given.strip():
        raise _fail(f"units.{tag}", f"the header says [{header_unit}] but the mapping says {given!r}")
    unit = header_unit if header_unit is not None else given
    if unit is None:
        raise _fail(f"units.{tag}", f"no unit for {tag!r}: write it in the header as '{tag} [unit]' or give it")
    return unit


def _finish(epoch: np.ndarray, series: dict, tags: dict, unit_of: dict, rows: int, dropped: dict, layout: str,
            notes: list[str]) -> Dataset:  # fmt: skip
    steps = np.diff(epoch)
    median = float(np.median(steps)) if steps.size else 0.0
    gaps = (
        [(float(epoch[k]), float(epoch[k + 1])) for k in np.nonzero(steps > GAP_FACTOR * median)[0]] if median else []
    )
    irregular = bool(steps.size and median > 0 and np.mean(np.abs(steps - median) > 0.1 * median) > 0.05)
    return Dataset(epoch, series, tags, unit_of, rows, dropped, gaps, median, irregular, layout, notes)


def _wide(df: Any, header: list[str], mapping: Mapping[str, str], units: Mapping[str, str],
          time_column: str | None) -> Dataset:  # fmt: skip
    names, header_units = [], []
    for h in header:
        m = _HEADER_UNIT.match(h)
        names.append(m.group("name") if m else h)
        header_units.append(m.group("unit") if m else None)
    if time_column is None:
        candidates = [k for k, n in enumerate(names) if n.lower() in ("time", "timestamp", "date_time", "datetime")]
        t_idx = candidates[0] if candidates else 0
    elif time_column in names:
        t_idx = names.index(time_column)
    else:
        raise _fail("time_column", f"no column {time_column!r}; columns: {', '.join(names)}")
    for tag in mapping:
        if tag not in names:
            raise _fail(f"mapping.{tag}", f"no column {tag!r} in the file; columns: {', '.join(names)}")
    epoch, notes = _times(df.iloc[:, t_idx].to_numpy(), names[t_idx], 2)
    back = np.nonzero(np.diff(epoch) <= 0)[0]
    if back.size:
        k = int(back[0]) + 1
        raise _fail(f"line {k + 2}, column {t_idx + 1}", "time does not increase (it goes backwards or repeats)")
    series, tags, unit_of, dropped = {}, {}, {}, {}
    for tag, role in mapping.items():
        col = names.index(tag)
        unit = _unit_of(tag, header_units[col], units)
        a, b = _si_map(unit, role_dimension(role), f"units.{tag}")
        values, bad = _numbers(df.iloc[:, col].to_numpy(), tag, 2, col + 1)
        series[role] = a + b * values
        tags[role], unit_of[role], dropped[tag] = tag, unit, bad
    return _finish(epoch, series, tags, unit_of, len(df), dropped, "wide", notes)


def _long(df: Any, header: list[str], lower: list[str], mapping: Mapping[str, str],
          units: Mapping[str, str]) -> Dataset:  # fmt: skip
    import pandas as pd

    col = {name: lower.index(name) for name in ("tag", "time", "value")}
    tag_col = df.iloc[:, col["tag"]].astype(str).str.strip()
    tag_names = tag_col.to_numpy()
    base_tags = {}
    for t in pd.unique(tag_names):
        m = _HEADER_UNIT.match(t)
        base_tags[t] = (m.group("name"), m.group("unit")) if m else (t, None)
    for tag in mapping:
        if tag not in {b for b, _ in base_tags.values()}:
            known = ", ".join(sorted({b for b, _ in base_tags.values()}))
            raise _fail(f"mapping.{tag}", f"no tag {tag!r} in the file; tags: {known}")
    epoch_all, notes = _times(df.iloc[:, col["time"]].to_numpy(), "time", 2)
    values_all, _ = _numbers(df.iloc[:, col["value"]].to_numpy(), "value", 2, col["value"] + 1)
    good = np.ones(len(df), dtype=bool)
    if "quality" in lower:
        q = df.iloc[:, lower.index("quality")].astype(str).str.strip().str.lower()
        good = q.isin(GOOD_QUALITY).to_numpy()
    lines = np.arange(len(df)) + 2
    per_role: dict[str, tuple[np.ndarray, np.ndarray]] = {}
    tags, unit_of, dropped = {}, {}, {}
    for raw, (base, hunit) in base_tags.items():
        if base not in mapping:
            continue
        role = mapping[base]
        sel = tag_names == raw
        t, v, ok, ln = epoch_all[sel], values_all[sel], good[sel], lines[sel]
        back = np.nonzero(np.diff(t) <= 0)[0]
        if back.size:
            raise _fail(f"line {int(ln[back[0] + 1])}, column {col['time'] + 1}",
                        f"time of {base!r} does not increase (it goes backwards or repeats)")  # fmt: skip
        unit = _unit_of(base, hunit, units)
        a, b = _si_map(unit, role_dimension(role), f"units.{base}")
        keep = ok & np.isfinite(v)
        dropped[base] = int((~keep).sum())
        per_role[role] = (t[keep], a + b * v[keep])
        tags[role], unit_of[role] = base, unit
    epoch = np.unique(np.concatenate([t for t, _ in per_role.values()]))
    if epoch.size < 2:
        raise _fail("file", "fewer than two good records for the mapped tags")
    series = {}
    for role, (t, v) in per_role.items():
        out = np.full(epoch.size, np.nan)
        out[np.searchsorted(epoch, t)] = v
        series[role] = out
    return _finish(epoch, series, tags, unit_of, len(df), dropped, "long", notes)


def dataset_from_canonical(summary: Mapping[str, Any], content: str) -> Dataset:
    """A stored dataset back from its summary and canonical CSV (``Dataset.canonical_csv``); the id is the same."""
    import pandas as pd

    df = pd.read_csv(io.StringIO(content), dtype=float)
    epoch = df["time_s"].to_numpy(dtype=float)
    series = {c: df[c].to_numpy(dtype=float) for c in df.columns if c != "time_s"}
    roles = summary.get("roles", {})
    gaps = [(float(g["start_s"]), float(g["end_s"])) for g in summary.get("gap_times", [])]
    return Dataset(
        epoch,
        series,
        {r: str(v.get("tag", r)) for r, v in roles.items()},
        {r: str(v.get("unit", "")) for r, v in roles.items()},
        int(summary.get("rows", epoch.size)),
        dict(summary.get("dropped_bad", {})),
        gaps,
        float(summary.get("median_step_s", 0.0)),
        bool(summary.get("irregular_sampling", False)),
        str(summary.get("layout", "wide")),
        list(summary.get("notes", [])),
    )


#: How a window's time is written (the import's conventions), for error messages.
TIME_FORMAT = "ISO 8601 (2026-12-02T08:00:00Z; without a zone read as UTC) or epoch seconds"


def parse_time(value: Any, field_name: str) -> float:
    """Epoch seconds of one time given as the import reads times: ISO 8601 (no zone: UTC) or epoch seconds (a
    number or its text); ``ScenarioError`` naming ``field_name`` and the format otherwise."""
    import pandas as pd

    if isinstance(value, bool):
        raise _fail(field_name, f"{value!r} is not a time; expected {TIME_FORMAT}")
    if isinstance(value, (int, float)):
        if not math.isfinite(value):
            raise _fail(field_name, f"{value!r} is not a time; expected {TIME_FORMAT}")
        return float(value)
    text = str(value).strip()
    try:
        seconds = float(text)
    except ValueError:
        pass
    else:
        if math.isfinite(seconds):
            return seconds
    try:
        parsed = pd.to_datetime(text, format="ISO8601", utc=True)
    except (ValueError, TypeError, OverflowError):
        parsed = None
    if parsed is None or pd.isna(parsed):
        raise _fail(field_name, f"{text!r} is not a time; expected {TIME_FORMAT}")
    return float((parsed - pd.Timestamp(0, tz="UTC")) / pd.Timedelta(seconds=1))


def window(ds: Dataset, start: Any = None, end: Any = None, *, min_records: int = 2) -> tuple[Dataset, dict]:
    """The records of ``ds`` from ``start`` to ``end`` (both included; either may be None: the first or last
    record), as a dataset, and what the window was: ``{start, end, records, offset_s, whole}`` (``offset_s``:
    seconds from the dataset's first record to the window's first).

    ``ScenarioError`` naming ``start`` or ``end`` when a time cannot be read, the window is not inside the data,
    ends before it starts, or holds fewer than ``min_records`` records."""
    from datetime import UTC, datetime

    def iso(s: float) -> str:
        try:
            return datetime.fromtimestamp(s, tz=UTC).isoformat().replace("+00:00", "Z")
        except (OverflowError, OSError, ValueError):  # beyond the calendar: the number as given
            return f"{s:g} s since 1970"

    first, last = float(ds.epoch_s[0]), float(ds.epoch_s[-1])
    eps = 1e-6  # s: a time written to the microsecond is the record's time
    a = first if start is None else parse_time(start, "start")
    b = last if end is None else parse_time(end, "end")
    if a < first - eps:
        raise _fail("start", f"{iso(a)} is before the first record ({iso(first)}); the window must lie inside the "
                             f"data; expected {TIME_FORMAT}")  # fmt: skip
    if b > last + eps:
        raise _fail("end", f"{iso(b)} is after the last record ({iso(last)}); the window must lie inside the "
                           f"data; expected {TIME_FORMAT}")  # fmt: skip
    if b <= a:
        raise _fail("end", f"{iso(b)} is not after start ({iso(a)}); expected a later time, {TIME_FORMAT}")
    lo = int(np.searchsorted(ds.epoch_s, a - eps, side="left"))
    hi = int(np.searchsorted(ds.epoch_s, b + eps, side="right"))
    n = hi - lo
    if n < min_records:
        raise _fail("end", f"the window {iso(a)} .. {iso(b)} holds {n} records; at least {min_records} are needed: "
                           "choose a later end or an earlier start")  # fmt: skip
    info = {
        "start": iso(float(ds.epoch_s[lo])),
        "end": iso(float(ds.epoch_s[hi - 1])),
        "records": n,
        "offset_s": float(ds.epoch_s[lo] - ds.epoch_s[0]),
        "whole": lo == 0 and hi == ds.epoch_s.size,
    }
    if info["whole"]:
        return ds, info
    t = ds.epoch_s[lo:hi]
    sliced = Dataset(
        t,
        {r: v[lo:hi] for r, v in ds.series.items()},
        dict(ds.tags),
        dict(ds.units),
        n,
        dict(ds.dropped_bad),
        [(g0, g1) for g0, g1 in ds.gaps if g0 >= t[0] and g1 <= t[-1]],
        ds.median_step_s,
        ds.irregular,
        ds.layout,
        list(ds.notes),
    )
    return sliced, info
