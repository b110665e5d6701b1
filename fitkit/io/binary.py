"""NumPy .npz and Parquet captures: read them, and write them for round trips.

Both hold a time array named ``t`` (or ``time``) in seconds and one array per
channel in SI units. fitkit also stores each channel's unit and the capture's
metadata, so a capture written here reads back the same; files from elsewhere
need only the arrays. Writing goes through :mod:`fitkit.atomic`.
"""

from __future__ import annotations

import io
import json
import zipfile
import zlib
from pathlib import Path

import numpy as np

from ..atomic import write_bytes_atomic
from ..capture import Capture, Channel, Provenance
from ..errors import CaptureError
from . import checks

TIME_KEYS = ("t", "time", "Time", "time_s")
_UNITS_KEY = "__fitkit_units__"
_META_KEY = "__fitkit_metadata__"


def save_npz(capture: Capture, path: str | Path) -> Path:
    """Write ``capture`` to a .npz file (arrays ``t`` and one per channel) atomically."""
    buf = io.BytesIO()
    arrays = {"t": capture.time}
    for ch in capture.channels:
        arrays[ch.name] = ch.values
    arrays[_UNITS_KEY] = np.array(json.dumps({ch.name: [ch.unit, ch.source_unit] for ch in capture.channels}))
    arrays[_META_KEY] = np.array(json.dumps(dict(capture.metadata)))
    np.savez_compressed(buf, **arrays)
    return write_bytes_atomic(path, buf.getvalue())


def save_parquet(capture: Capture, path: str | Path) -> Path:
    """Write ``capture`` to a Parquet file (column ``t`` and one per channel) atomically."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    columns = {"t": pa.array(capture.time)}
    for ch in capture.channels:
        columns[ch.name] = pa.array(ch.values)
    table = pa.table(columns)
    table = table.replace_schema_metadata({
        _UNITS_KEY: json.dumps({ch.name: [ch.unit, ch.source_unit] for ch in capture.channels}),
        _META_KEY: json.dumps(dict(capture.metadata)),
    })
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink)
    return write_bytes_atomic(path, sink.getvalue().to_pybytes())


def read_npz(path: str | Path, *, sample_interval: float | None = None,
             time_origin: float | None = None) -> Capture:
    """Read a .npz capture. Without a time array, ``sample_interval`` builds the axis."""
    path = str(path)
    try:
        with np.load(path, allow_pickle=False) as data:
            arrays = {k: np.asarray(data[k]) for k in data.files}
    except FileNotFoundError:
        raise CaptureError("file not found", path=path, hint="check the file name") from None
    # zipfile raises RuntimeError for a member flagged encrypted and NotImplementedError
    # for an unknown compression method (both seen on corrupted files)
    except (OSError, ValueError, zipfile.BadZipFile, zlib.error, EOFError, KeyError, RuntimeError,
            NotImplementedError) as exc:
        raise CaptureError(f"not a readable .npz file ({type(exc).__name__})", path=path,
                           hint="write it with numpy.savez or fitkit.io.save_npz") from None
    units = _json(arrays.pop(_UNITS_KEY, None))
    meta = _json(arrays.pop(_META_KEY, None))
    return _from_arrays(path, arrays, units, meta, "NumPy .npz arrays", sample_interval, time_origin)


def read_parquet(path: str | Path, *, sample_interval: float | None = None,
                 time_origin: float | None = None) -> Capture:
    """Read a Parquet capture (column ``t`` or ``time`` plus channel columns)."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = str(path)
    try:
        table = pq.read_table(path)
        names = table.column_names  # decodes the stored names (a corrupt one raises here)
    except FileNotFoundError:
        raise CaptureError("file not found", path=path, hint="check the file name") from None
    except (OSError, pa.ArrowException, ValueError) as exc:
        raise CaptureError(f"not a readable Parquet file ({type(exc).__name__})", path=path,
                           hint="write it with pandas.DataFrame.to_parquet or fitkit.io.save_parquet") from None
    schema_meta = table.schema.metadata or {}
    units = _json(schema_meta.get(_UNITS_KEY.encode()))
    meta = _json(schema_meta.get(_META_KEY.encode()))
    arrays = {}
    for name in names:
        try:
            arrays[name] = table.column(name).to_numpy(zero_copy_only=False)
        except (pa.ArrowException, ValueError):
            continue
    return _from_arrays(path, arrays, units, meta, "Parquet columns", sample_interval, time_origin)


def _json(raw) -> dict:
    if raw is None:
        return {}
    try:
        text = raw.decode() if isinstance(raw, bytes) else str(raw.item() if hasattr(raw, "item") else raw)
        value = json.loads(text)
        return value if isinstance(value, dict) else {}
    except (ValueError, UnicodeDecodeError, AttributeError):
        return {}


def _from_arrays(path: str, arrays: dict[str, np.ndarray], units: dict, meta: dict, layout: str,
                 sample_interval: float | None, time_origin: float | None) -> Capture:
    decisions = []
    numeric = {}
    for k, v in arrays.items():
        if v.ndim == 1 and v.dtype.kind in "fiu" and v.size:
            numeric[k] = v.astype(float, copy=False)
    time_key = next((k for k in TIME_KEYS if k in numeric), None)
    channels = {k: v for k, v in numeric.items() if k != time_key}
    if not channels:
        raise CaptureError("no one-dimensional numeric channel arrays found", path=path,
                           hint="store the time as 't' and each channel as its own 1-D array")
    sizes = {v.size for v in channels.values()} | ({numeric[time_key].size} if time_key else set())
    if len(sizes) != 1:
        raise CaptureError(f"arrays have different lengths {sorted(sizes)}", path=path,
                           hint="every channel must have one value per time sample")
    n = sizes.pop()
    given_over_time: list[str] = []
    if time_key is not None and sample_interval is None:
        t = numeric[time_key]
        decisions.append(f"time: array {time_key!r}")
    elif sample_interval is not None:
        t = (time_origin or 0.0) + np.arange(n) * float(sample_interval)
        decisions.append(f"time: built from the sample interval {sample_interval:.6g} s (given)")
        if time_key is not None:
            given_over_time.append(f"--sample-interval given: the file's time array {time_key!r} is not used")
    else:
        raise CaptureError("no time array ('t' or 'time') in the file", path=path,
                           hint="give the sample interval with --sample-interval")
    warnings = list(given_over_time)
    finite = np.isfinite(t)
    for v in channels.values():
        finite &= np.isfinite(v)
    if not finite.all():
        bad = np.flatnonzero(~finite)
        msg = checks.bad_rows_policy(bad, n, path=path, what="NaN or infinite values",
                                     line_of_row=lambda r: None)
        warnings.append(msg)
        t = t[finite]
        channels = {k: v[finite] for k, v in channels.items()}
    bad = checks.first_nonincreasing(t)
    if bad is not None:
        raise CaptureError(f"time does not increase at sample {bad + 1} ({t[bad]:.9g} s after "
                           f"{t[bad - 1]:.9g} s)", path=path, hint="sort the samples by time")
    spread = checks.nonuniform_warning(t)
    if spread:
        warnings.append(spread)
    warnings.extend(checks.value_warnings(channels, path=path))
    chans = []
    for name, v in channels.items():
        unit, source = (units.get(name) or ["", ""])[:2] if isinstance(units.get(name), list) else ("", "")
        chans.append(Channel(str(name), v, str(unit), str(source)))
    if not units:
        decisions.append("channel units not stored in the file: values kept without a unit (not called volts)")
    return Capture(time=t, channels=tuple(chans), metadata={str(k): str(v) for k, v in meta.items()},
                   provenance=Provenance(path=path, data_start_line=None, layout=layout,
                                         decisions=tuple(decisions)),
                   warnings=tuple(warnings))
