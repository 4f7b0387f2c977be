"""The channel table with requirement values and key figures, as CSV or JSON (``specfold export``).

The requirement as written (one column per key used by any channel, in the format's order), the
channel's status, and the key computed figures as ``figure.<key>`` columns with full-precision
numbers.  Import reads the export back: import, export, import gives the same files.
"""

from __future__ import annotations

import csv
import io
import json
import math
import tomllib
from collections.abc import Mapping
from typing import Any

from . import schema
from .analysis import FIGURES, SystemAnalysis
from .rules import Finding, by_channel, worst_status
from .table import FIGURE_PREFIX, PAIR_PARTS, TABLE_FORMAT, canonical_columns, guard_cell

EXPORT_FIGURES = (
    "sample_rate_hz", "nyquist_hz", "rate_over_nyquist", "first_alias_hz", "alias_rejection_db",
    "band_edge_droop_db", "peak_level_dbfs", "range_usage", "headroom_db", "lsb_volts", "lsb_units",
    "sqnr_db", "jitter_snr_db", "sensor_snr_db", "total_snr_db", "enob_bits", "dynamic_range_db",
    "data_rate_bps", "zoh_droop_db", "first_image_hz", "image_rejection_db", "output_peak_volts",
    "frame_rate_hz", "pixel_pitch_m", "spatial_nyquist_cycles_per_m",
)
"""The computed figures the table carries: what a supplier or a spreadsheet needs most."""


def _text(value: object) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return repr(value)
    return str(value)


def flatten(header: Mapping[str, Any], notes: str = "") -> dict[str, str]:
    """A channel header (as TOML parsed it) as ``{column: cell text}``; the inverse of import."""
    out: dict[str, str] = {}
    for name, value in header.items():
        if name in schema.ARRAY_TABLES and isinstance(value, list):
            for i, item in enumerate(value):
                for k, v in item.items():
                    out[f"{name}.{i + 1}.{k}"] = _text(v)
            continue
        if name in schema.CHANNEL_TABLES and isinstance(value, dict):
            for k, v in value.items():
                path = f"{name}.{k}"
                if path in PAIR_PARTS and isinstance(v, list) and len(v) == 2:
                    for part, half in zip(PAIR_PARTS[path], v, strict=True):
                        out[f"{path}.{part}"] = _text(half)
                else:
                    out[path] = _text(v)
            continue
        if isinstance(value, list):
            out[name] = "; ".join(_text(v) for v in value)
        else:
            out[name] = _text(value)
    if notes:
        out["notes"] = notes
    return out


def _column_order(used: set[str]) -> list[str]:
    canon = canonical_columns()
    arrays: list[str] = []
    for table in schema.ARRAY_TABLES:
        numbers = sorted({int(c.split(".")[1]) for c in used if c.startswith(f"{table}.")})
        names = [k.name for k in schema.CHANNEL_KEYS if k.table == table]
        arrays.extend(f"{table}.{n}.{k}" for n in numbers for k in names if f"{table}.{n}.{k}" in used)
    req = [c for c in canon[:-1] if c in used or c in ("id", "kind", "title")]
    return req + arrays + (["notes"] if "notes" in used else [])


def export_table(analysis: SystemAnalysis, findings: list[Finding]) -> tuple[list[str], list[dict[str, Any]]]:
    """Columns and rows of the channel table: the requirement as written, status, key figures."""
    rows: list[dict[str, Any]] = []
    used: set[str] = set()
    wanted = [k for k in EXPORT_FIGURES if k in FIGURES]
    present: set[str] = set()
    mine = by_channel(findings)
    for r in analysis.channels:
        ch = r.channel
        cells: dict[str, Any] = {"id": ch.id, **flatten(tomllib.loads(ch.header), ch.notes)}
        used.update(cells)
        cells["status"] = worst_status(mine.get(ch.id, ()))
        figures = r.figures
        for k in wanted:
            value = figures.get(k)
            if isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value):
                cells[FIGURE_PREFIX + k] = float(value)
                present.add(k)
        rows.append(cells)
    columns = _column_order(used) + ["status"] + [FIGURE_PREFIX + k for k in wanted if k in present]
    return columns, [{c: row.get(c) for c in columns} for row in rows]


def to_csv(columns: list[str], rows: list[dict[str, Any]]) -> str:
    """The table as CSV: every text cell quoted and guarded against formula injection
    (:func:`guard_cell`), numbers written bare so that a spreadsheet reads them as numbers."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n", quoting=csv.QUOTE_NONNUMERIC)
    writer.writerow([guard_cell(c) for c in columns])
    for row in rows:
        writer.writerow([_cell(row[c]) for c in columns])
    return buf.getvalue()


def _cell(value: object) -> str | float:
    if isinstance(value, float) and not isinstance(value, bool):
        return value
    return "" if value is None else guard_cell(_text(value))


def to_json_table(columns: list[str], rows: list[dict[str, Any]], ascii_only: bool = False) -> str:
    doc = {"format": TABLE_FORMAT, "columns": columns, "channels": rows}
    return json.dumps(doc, indent=2, ensure_ascii=ascii_only, allow_nan=False) + "\n"
