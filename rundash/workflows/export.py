"""Tidy tables of a run's results and of a comparison, for spreadsheets and notebooks.

Every table is a :class:`pandas.DataFrame` with one row per observation and plain
column names (README, "Exports", documents every column): vectors one row per block
(revolution), probe, order and compensation; the speed profile one row per revolution;
findings one row per critical speed; limits one row per level check; the cascade one row
per spectrum line and frequency; a comparison one row per compared quantity. Tables that
hold verdicts carry :data:`rundash.CAUTION` in a ``caution`` column.

:func:`table_bytes` turns a table into the bytes of a CSV, Parquet or Excel (xlsx) file;
the faces write them (the CLI to a file, the dashboard to a download).
"""

from __future__ import annotations

import io
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import pandas as pd

from rundash import CAUTION
from rundash.dsp.directions import split_by_direction
from rundash.errors import InputError, NotFoundError, invalid_value
from rundash.storage import queries as q
from rundash.units import LEVEL_CONVENTION, STORAGE_UNIT, VECTOR_AMPLITUDE_CONVENTION

WHATS = ("vectors", "speed", "findings", "limits", "cascade")
FORMATS = ("csv", "parquet", "xlsx")
MIME = {"csv": "text/csv",
        "parquet": "application/vnd.apache.parquet",
        "xlsx": "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"}
#: Rows an Excel sheet holds (header included): 2**20.
XLSX_MAX_ROWS = 1_048_576

VECTOR_COLUMNS = ("run_id", "probe", "bearing", "axis", "kind", "order", "compensated",
                  "revolution", "revs_per_block", "time_s", "speed_rpm", "direction",
                  "amplitude", "amplitude_unit", "amplitude_convention", "phase_lag_deg",
                  "direct", "direct_unit", "direct_convention")
SPEED_COLUMNS = ("run_id", "revolution", "time_s", "speed_rpm", "direction")
CASCADE_COLUMNS = ("run_id", "probe", "kind", "line", "time_s", "speed_rpm", "direction",
                   "freq_hz", "order", "amplitude", "amplitude_unit", "amplitude_convention")
COMPARISON_COLUMNS = ("machine", "reference", "run_a", "run_b", "pair_verdict",
                      "like_with_like", "probe", "bearing", "axis", "kind", "direction_a",
                      "direction_b", "section", "critical", "quantity", "units", "a", "b",
                      "a_std", "b_std", "a_lag_deg", "b_lag_deg", "delta", "delta_pct",
                      "sigma", "significant", "k", "floor", "floor_source", "flagged",
                      "changed", "hints", "notes", "caution")


def _directions(time_s: np.ndarray, segments) -> np.ndarray:
    """The run direction of every time (run-up, coast-down, steady, mixed), as drawn."""
    out = np.full(len(time_s), "mixed", dtype=object)
    for kind, idx in split_by_direction(time_s, segments):
        out[idx] = kind
    return out


def _context(db, run_id: int):
    with db.read() as conn:
        run = q.get_run(conn, int(run_id))
        machine = q.get_machine(conn, q.run_machine_id(conn, int(run_id)))
        proc = q.load_processing(conn, int(run_id))
    if proc is None:
        raise NotFoundError(f"run {run_id} is not processed yet: run 'rundash process "
                            f"{run_id}' first")
    return run, machine, proc


def _frame(rows: Iterable[Mapping[str, Any]] | Mapping[str, Any], columns: Sequence[str]
           ) -> pd.DataFrame:
    df = pd.DataFrame(rows if isinstance(rows, Mapping) else list(rows))
    for c in columns:
        if c not in df.columns:
            df[c] = pd.Series(dtype=object)
    return df[list(columns)]


# ----------------------------------------------------------------------------- run tables
def vectors_table(db, run_id: int, *, orders: Sequence[float] | None = None,
                  probe: str | None = None, compensated: bool | None = None) -> pd.DataFrame:
    """The stored nX vectors of a run: one row per block (revolution), probe, order and
    compensation (both unless ``compensated`` says which), in storage units."""
    run, machine, proc = _context(db, run_id)
    specs = {p.name: p for p in machine.probes}
    rpb = int(proc.params.get("revs_per_block", 1) or 1)
    with db.read() as conn:
        tracks = q.load_tracks(conn, int(run_id), compensated=compensated, probe_name=probe)
    if probe is not None and not tracks:
        raise NotFoundError(f"run {run_id} has no vectors of probe {probe!r} (probes: "
                            f"{', '.join(specs) or 'none'})")
    wanted = None if orders is None else {float(o) for o in orders}
    parts = []
    for t in tracks:
        if wanted is not None and float(t.order) not in wanted:
            continue
        n = len(t.time_s)
        spec = specs.get(t.probe_name)
        parts.append(pd.DataFrame({
            "run_id": int(run_id), "probe": t.probe_name,
            "bearing": spec.bearing if spec else "", "axis": spec.axis if spec else "",
            "kind": t.kind, "order": float(t.order), "compensated": bool(t.compensated),
            "revolution": np.arange(n, dtype=np.int64) * rpb, "revs_per_block": rpb,
            "time_s": t.time_s, "speed_rpm": t.speed_rpm,
            "direction": _directions(t.time_s, proc.segments),
            "amplitude": t.amplitude, "amplitude_unit": STORAGE_UNIT.get(t.kind, ""),
            "amplitude_convention": VECTOR_AMPLITUDE_CONVENTION.get(t.kind, ""),
            "phase_lag_deg": t.phase_lag_deg, "direct": t.direct,
            "direct_unit": STORAGE_UNIT.get(t.kind, ""),
            "direct_convention": LEVEL_CONVENTION.get(t.kind, "")}))
    if wanted is not None and not parts:
        stored = sorted({float(t.order) for t in tracks})
        raise NotFoundError(f"run {run_id} has no vectors of order(s) "
                            f"{', '.join(f'{o:g}' for o in sorted(wanted))} "
                            f"(stored: {', '.join(f'{o:g}' for o in stored) or 'none'})")
    if not parts:
        return _frame([], VECTOR_COLUMNS)
    return pd.concat(parts, ignore_index=True)[list(VECTOR_COLUMNS)]


def speed_table(db, run_id: int) -> pd.DataFrame:
    """The speed profile: one row per revolution (rpm at the revolution's mid-time)."""
    _, _, proc = _context(db, run_id)
    with db.read() as conn:
        prof = q.load_speed_profile(conn, int(run_id))
    if prof is None:
        return _frame([], SPEED_COLUMNS)
    t, rpm = prof
    return pd.DataFrame({"run_id": int(run_id), "revolution": np.arange(len(t), dtype=np.int64),
                         "time_s": t, "speed_rpm": rpm,
                         "direction": _directions(t, proc.segments)})[list(SPEED_COLUMNS)]


def _flat(entry: Mapping[str, Any]) -> dict[str, Any]:
    """A findings entry as one row: ``band_rpm`` as ``band_lo_rpm``/``band_hi_rpm``, other
    lists joined by '; ', a nested object's plain values as ``<key>_<inner key>``."""
    out: dict[str, Any] = {}
    for k, v in entry.items():
        if k == "band_rpm":
            lo, hi = (list(v) + [None, None])[:2] if v else (None, None)
            out["band_lo_rpm"], out["band_hi_rpm"] = lo, hi
        elif isinstance(v, (list, tuple)):
            out[k] = "; ".join(str(x) for x in v)
        elif isinstance(v, Mapping):
            for k2, v2 in v.items():
                if v2 is None or isinstance(v2, (str, int, float, bool)):
                    out[f"{k}_{k2}"] = v2
        else:
            out[k] = v
    return out


def verdict_rows(findings: Mapping[str, Any], key: str, run_id: int | None) -> pd.DataFrame:
    """The entries ``findings[key]`` (``criticals`` or ``limits``) as rows with the run
    verdict and the caution; one row holding only those when there is no entry."""
    rows = [_flat(e) for e in findings.get(key) or []]
    head = {"run_id": None if run_id is None else int(run_id),
            "run_verdict": findings.get("run_verdict")}
    if not rows:  # a table without rows would lose the verdict and the caution
        rows = [{"probe": None}]
    df = pd.DataFrame([{**head, **r} for r in rows])
    df["caution"] = findings.get("caution") or CAUTION
    return df


def _findings(db, run_id: int) -> Mapping[str, Any]:
    _, _, proc = _context(db, run_id)
    if proc.findings is None:
        raise NotFoundError(f"run {run_id} has no findings yet: run 'rundash process "
                            f"{run_id}' first")
    return proc.findings


def findings_table(db, run_id: int) -> pd.DataFrame:
    """One row per critical speed (probe and direction) with the keys of ``criticals[]``
    of the findings JSON, the run verdict and the caution; one row of the verdict when
    there is no critical."""
    return verdict_rows(_findings(db, run_id), "criticals", run_id)


def limits_table(db, run_id: int) -> pd.DataFrame:
    """One row per level check with the keys of ``limits[]`` of the findings JSON, the
    run verdict and the caution."""
    return verdict_rows(_findings(db, run_id), "limits", run_id)


def cascade_table(db, run_id: int, *, probe: str | None = None) -> pd.DataFrame:
    """The stored cascade: one row per spectrum line (speed step), probe and frequency."""
    _, _, proc = _context(db, run_id)
    with db.read() as conn:
        kinds = {c.probe_name: c.kind for c in q.list_channels(conn, int(run_id))}
        cascades = q.load_cascades(conn, int(run_id))
    if probe is not None:
        cascades = [c for c in cascades if c.probe_name == probe]
        if not cascades:
            raise NotFoundError(f"run {run_id} has no cascade of probe {probe!r}")
    parts = []
    for c in cascades:
        nr, nf = c.amplitude.shape
        kind = kinds.get(c.probe_name) or ""
        speed = np.repeat(c.speed_rpm, nf)
        freq = np.tile(c.freq_hz, nr)
        with np.errstate(divide="ignore", invalid="ignore"):
            order = np.where(speed > 0, freq * 60.0 / speed, np.nan)
        parts.append(pd.DataFrame({
            "run_id": int(run_id), "probe": c.probe_name, "kind": kind,
            "line": np.repeat(np.arange(nr, dtype=np.int64), nf),
            "time_s": np.repeat(c.time_s, nf), "speed_rpm": speed,
            "direction": np.repeat(_directions(c.time_s, proc.segments), nf),
            "freq_hz": freq, "order": order,
            "amplitude": c.amplitude.astype(np.float64).ravel(),
            "amplitude_unit": STORAGE_UNIT.get(kind, ""), "amplitude_convention": "pk"}))
    if not parts:
        return _frame([], CASCADE_COLUMNS)
    return pd.concat(parts, ignore_index=True)[list(CASCADE_COLUMNS)]


def run_table(db, run_id: int, what: str, *, orders: Sequence[float] | None = None,
              probe: str | None = None) -> pd.DataFrame:
    """The table ``what`` (one of :data:`WHATS`) of a run."""
    if what == "vectors":
        return vectors_table(db, run_id, orders=orders, probe=probe)
    if what == "cascade":
        return cascade_table(db, run_id, probe=probe)
    tables = {"speed": speed_table, "findings": findings_table, "limits": limits_table}
    if what not in tables:
        raise InputError(invalid_value("what", what, ", ".join(WHATS)))
    df = tables[what](db, run_id)
    if probe is not None and "probe" in df.columns and what != "speed":
        df = df[(df["probe"] == probe) | df["probe"].isna()].reset_index(drop=True)
    return df


# ----------------------------------------------------------------------------- comparison
def _shift_row(s: Mapping[str, Any] | None) -> dict[str, Any]:
    s = s or {}
    return {k: s.get(k) for k in ("a", "b", "a_std", "b_std", "delta", "delta_pct", "sigma",
                                  "significant", "k", "floor", "floor_source", "flagged")}


def comparison_table(comparison: Mapping[str, Any]) -> pd.DataFrame:
    """A comparison (schema ``rundash.comparison/1``) as one row per run pair, probe and
    compared quantity: the critical speed, AF and peak 1X of each matched critical
    (``section`` 'critical'), the lag and 1X at the chosen speeds ('phase') and the
    slow-roll vector ('slow roll'); with the pair's verdict and the caution."""
    rows = []
    head = {"machine": (comparison.get("machine") or {}).get("name"),
            "reference": comparison.get("reference")}
    for p in comparison.get("pairs") or []:
        pair = {**head, "run_a": p.get("a"), "run_b": p.get("b"),
                "pair_verdict": p.get("verdict"), "like_with_like": p.get("like_with_like")}
        for pr in p.get("probes") or []:
            probe = {"probe": pr.get("probe"), "bearing": pr.get("bearing"),
                     "axis": pr.get("axis"), "kind": pr.get("kind"),
                     "direction_a": pr.get("direction_a"), "direction_b": pr.get("direction_b")}
            notes = list(pr.get("notes") or [])
            for i, m in enumerate(pr.get("criticals") or []):
                for key, units in (("speed", "rpm"), ("af", ""),
                                   ("peak_amplitude", pr.get("units") or "")):
                    s = m.get(key) or {}
                    rows.append({**pair, **probe, "section": "critical", "critical": i,
                                 "quantity": s.get("quantity") or key,
                                 "units": s.get("units") or units, **_shift_row(s),
                                 "changed": m.get("changed"),
                                 "hints": "; ".join(m.get("hints") or []),
                                 "notes": "; ".join(notes + list(m.get("notes") or []))})
            for s in pr.get("phase") or []:
                rows.append({**pair, **probe, "section": "phase", "quantity": s.get("quantity"),
                             "units": s.get("units") or (pr.get("units") or ""),
                             **_shift_row(s), "notes": "; ".join(notes)})
        for s in p.get("slow_roll") or []:
            rows.append({**pair, "probe": s.get("probe"), "kind": s.get("kind"),
                         "section": "slow roll", "quantity": "slow-roll vector",
                         "units": s.get("units"), "a": s.get("a_amplitude"),
                         "b": s.get("b_amplitude"), "a_lag_deg": s.get("a_lag_deg"),
                         "b_lag_deg": s.get("b_lag_deg"), "delta": s.get("change"),
                         "sigma": s.get("sigma"), "significant": s.get("significant"),
                         "changed": s.get("material"), "hints": s.get("hint") or ""})
    df = _frame(rows, COMPARISON_COLUMNS)
    df["critical"] = df["critical"].astype("Int64")
    df["caution"] = comparison.get("caution") or CAUTION
    return df


# ----------------------------------------------------------------------------- files
def check_format(fmt: str) -> str:
    if fmt not in FORMATS:
        raise InputError(invalid_value("format", fmt, ", ".join(FORMATS)))
    return fmt


def format_of(path: str, fmt: str | None = None) -> str:
    """The format given, else the one the file name's ending says (``.csv``, ``.parquet``,
    ``.xlsx``)."""
    if fmt:
        return check_format(fmt)
    ending = str(path).rsplit(".", 1)[-1].lower() if "." in str(path) else ""
    if ending not in FORMATS:
        raise InputError(f"{path}: cannot tell the format from the file name; give "
                         f"--format ({', '.join(FORMATS)}) or end the name so")
    return ending


def table_bytes(df: pd.DataFrame, fmt: str, *, sheet: str = "rundash") -> bytes:
    """The bytes of a CSV (UTF-8, full float precision), Parquet (pyarrow) or Excel
    (openpyxl through pandas) file holding ``df``."""
    check_format(fmt)
    buf = io.BytesIO()
    if fmt == "csv":
        buf.write(df.to_csv(index=False).encode("utf-8"))
    elif fmt == "parquet":
        try:
            df.to_parquet(buf, index=False, engine="pyarrow")
        except ImportError as exc:
            raise InputError("Parquet output needs pyarrow: pip install -e \".[parquet]\"") from exc
    else:
        if len(df) + 1 > XLSX_MAX_ROWS:
            raise InputError(f"the table has {len(df)} rows, more than a spreadsheet holds "
                             f"({XLSX_MAX_ROWS - 1}): export it as csv or parquet, or narrow "
                             "it (--probe, --orders)")
        with pd.ExcelWriter(buf, engine="openpyxl") as xl:
            df.to_excel(xl, sheet_name=sheet[:31], index=False)
    return buf.getvalue()


def export_filename(run_id: int | str, what: str, fmt: str) -> str:
    """``rundash-run-<id>-<what>.<fmt>`` (``rundash-compare-<ids>.<fmt>`` for comparisons)."""
    return f"rundash-run-{run_id}-{what}.{fmt}" if what != "compare" else \
        f"rundash-compare-{run_id}.{fmt}"
