"""Session state and cached calls into ``core`` for the dashboard.

Pages read widgets, call the functions here, and draw with :mod:`dashboard.charts`. Nothing
here computes engineering results: loading, fitting, stages, forecasts, exports and the
store all live in ``core``; this module keys them, caches them and keeps the session's
choices. ``st.cache_data`` / ``st.cache_resource`` appear only in this module.

Caching
-------
* a load is keyed on the SHA-256 of the file bytes (and of the well-header file), the column
  mapping and the input unit system;
* a run is keyed on the load key, the run settings and the engineer overrides;
* an override starts from the cached run of the same load and settings: only the wells
  whose override changed are re-fitted (``core.run.rerun_wells``); a change of the economic
  limit inputs or the horizon keeps the fits (``core.run.rerun_forecast``). Without those
  functions in ``core.run`` the whole field is re-run (:func:`current_run`);
* results are held by ``st.cache_resource`` (no copy on each rerun; pages never modify
  them) with a small ``max_entries`` so memory stays bounded.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import inspect
import json
import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import streamlit as st

import core
from core.validation import InputError

ROOT = Path(__file__).absolute().parents[1]
SAMPLE_PRODUCTION = ROOT / "sample_wells" / "production.csv"
SAMPLE_HEADER = ROOT / "sample_wells" / "well_header.csv"

CAUTION = (
    "Forecasts are estimates; reserves bookings and field decisions follow local regulations "
    "and licensed professional practice."
)

# ---- session keys (constants; initialised once by init_state) ------------------------------
SOURCE = "dd_source"  # Source of the current production data
MAPPING = "dd_mapping"  # user's column mapping corrections, canonical -> source column
SETTINGS = "dd_settings"  # applied run settings, dict of RunSettings fields
CONFIRMED = "dd_confirmed"  # load key the user confirmed for computing
OVERRIDES = "dd_overrides"  # well_id -> WellOverride (session copy; the store keeps the trail)
OVERRIDE_LOG = "dd_override_log"  # session audit trail when no store is available
FLAGS = "dd_flags"  # waterflood planning flags (session copy when no store)
WELL = "dd_well"  # well shown on the well page
UNIT = "dd_unit"  # unit shown on the planning page
LAST_ERROR = "dd_last_error"
TIMINGS = "dd_timings"
PRESSURE_KIND = "dd_pressure_kind"  # what the pressure column holds (loader option)
APPEND = "dd_append"  # stored dataset id the current file is appended to (monthly update)

#: Environment variable for an app-level upload limit below the server's (MB).
UPLOAD_LIMIT_ENV = "DEPLETION_DESK_MAX_UPLOAD_MB"


@dataclass(frozen=True)
class Source:
    """The production file (and optional well-header file) the session works on."""

    kind: str  # "sample" or "upload"
    name: str
    content: bytes
    sha256: str
    header_name: str | None = None
    header_content: bytes | None = None
    header_sha256: str | None = None
    dataset_id: int | None = None  # kind "stored": a dataset kept in the store


def _sha(b: bytes | None) -> str | None:
    return None if b is None else hashlib.sha256(b).hexdigest()


def make_source(kind: str, name: str, content: bytes, header_name: str | None = None,
                header_content: bytes | None = None) -> Source:
    """A :class:`Source` with the SHA-256 of each file computed once."""
    return Source(kind, name, bytes(content), _sha(content), header_name,
                  None if header_content is None else bytes(header_content), _sha(header_content))


def sample_source() -> Source:
    """The bundled sample field (production and well-header files)."""
    header = SAMPLE_HEADER.read_bytes() if SAMPLE_HEADER.exists() else None
    return make_source("sample", SAMPLE_PRODUCTION.name, SAMPLE_PRODUCTION.read_bytes(),
                       SAMPLE_HEADER.name if header is not None else None, header)


def default_settings() -> dict[str, Any]:
    """The run settings' defaults as a dict (from ``core.run.RunSettings``)."""
    from core.run import RunSettings

    return RunSettings().as_dict()


def init_state() -> None:
    """Initialise every session key once; the bundled sample is the first start's data."""
    ss = st.session_state
    if SOURCE not in ss:
        ss[SOURCE] = sample_source() if SAMPLE_PRODUCTION.exists() else None
        # The sample is known-good: it is confirmed for computing straight away.
        ss[CONFIRMED] = None
        ss["dd_reopen_pending"] = True
    ss.setdefault(MAPPING, {})
    ss.setdefault(SETTINGS, default_settings())
    ss.setdefault(OVERRIDES, {})
    ss.setdefault(OVERRIDE_LOG, [])
    ss.setdefault(FLAGS, [])
    ss.setdefault(WELL, None)
    ss.setdefault(UNIT, None)
    ss.setdefault(TIMINGS, {})
    ss.setdefault(PRESSURE_KIND, "average_reservoir")
    ss.setdefault(APPEND, None)
    if ss[SOURCE] is not None and ss[SOURCE].kind == "sample" and ss.get(CONFIRMED) is None:
        ss[CONFIRMED] = load_key()
    if ss.pop("dd_reopen_pending", False):
        _reopen_last_kept_run()
    _restore_from_store()


# ---- upload limit ------------------------------------------------------------------------------
def upload_limit_mb() -> float:
    """Upload limit in MB: the server's ``server.maxUploadSize`` or a lower app-level limit
    from the environment variable ``DEPLETION_DESK_MAX_UPLOAD_MB``."""
    server = float(st.get_option("server.maxUploadSize"))
    env = os.environ.get(UPLOAD_LIMIT_ENV)
    try:
        return min(server, float(env)) if env else server
    except ValueError:
        return server


def check_upload_size(name: str, size_bytes: int) -> str | None:
    """A clear message when a file exceeds the upload limit, else None."""
    limit = upload_limit_mb()
    if size_bytes > limit * 1024 * 1024:
        return (
            f"{name} is {size_bytes / 1048576:.1f} MB, above this app's upload limit of "
            f"{limit:g} MB. Split the file by well or period, or raise the limit "
            f"(server.maxUploadSize in .streamlit/config.toml, or the {UPLOAD_LIMIT_ENV} "
            "environment variable)."
        )
    return None


# ---- the source and its load ------------------------------------------------------------------
def set_source(source: Source) -> None:
    """Switch the session to another file; mapping corrections and confirmation are reset."""
    ss = st.session_state
    if ss.get(SOURCE) is not None and ss[SOURCE].sha256 == source.sha256 and (
        ss[SOURCE].header_sha256 == source.header_sha256
    ):
        return
    ss[SOURCE] = source
    ss[MAPPING] = {}
    ss[CONFIRMED] = load_key() if source.kind in ("sample", "stored") else None
    ss[WELL] = None
    ss[UNIT] = None
    ss[OVERRIDES] = {}
    ss[FLAGS] = []
    ss[APPEND] = None
    _restore_from_store()


def current_source() -> Source | None:
    return st.session_state.get(SOURCE)


def set_mapping(mapping: dict[str, str | None]) -> None:
    """Store the user's column mapping corrections (canonical name -> source column)."""
    # None for a recognised column means "ignore it" (core.production.load_production).
    recognised = current_load().mapping
    clean = {k: (v or None) for k, v in mapping.items() if v or k in recognised}
    clean = {k: v for k, v in clean.items() if recognised.get(k) != v}
    if clean != st.session_state.get(MAPPING):
        st.session_state[MAPPING] = clean
        st.session_state[CONFIRMED] = None


def _settings_obj():
    from core.run import RunSettings

    names = {f.name for f in dataclasses.fields(RunSettings)}
    return RunSettings(**{k: v for k, v in st.session_state[SETTINGS].items() if k in names})


def load_key() -> str | None:
    """Cache key of the current load: file hashes, mapping and input units."""
    src = current_source()
    if src is None:
        return None
    ss = st.session_state
    units = ss.get(SETTINGS, {}).get("units", "field")
    unit_col = ss.get(SETTINGS, {}).get("unit_column")
    mapping = json.dumps(sorted(ss.get(MAPPING, {}).items()), default=str)
    return "|".join([src.sha256, str(src.header_sha256), mapping, str(units), str(unit_col), ss.get(PRESSURE_KIND, ""),
                     str(ss.get(APPEND))])


def _call_loader(src: Source, mapping: dict, units: str, unit_column: str | None, pressure_kind: str):
    """Call ``core.production.load_production`` on the session's files (bytes in memory)."""
    from core.production import load_production

    extra = {}
    if src.header_content is not None and "well_header_name" in inspect.signature(load_production).parameters:
        extra["well_header_name"] = src.header_name
    return load_production(
        src.content,
        file_name=src.name,
        mapping=mapping or None,
        units=units,
        unit_column=unit_column or None,
        well_header=src.header_content,
        pressure_kind=pressure_kind,
        max_bytes=int(upload_limit_mb() * 1024 * 1024),
        **extra,
    )


@st.cache_resource(max_entries=6, show_spinner=False)
def _cached_load(key: str, _src: Source, _mapping: dict, _units: str, _unit_column: str | None, _pressure_kind: str,
                 _append: int | None):
    """(LoadResult, merge report or None) for the session's file, cached on the load key."""
    if _src.kind == "stored":
        return _stored_load(_src.dataset_id), None
    load = _call_loader(_src, _mapping, _units, _unit_column, _pressure_kind)
    if _append is None:
        return load, None
    from core.changes import merge_loads

    held = _store().load_dataset(_append)
    return merge_loads(held.production, held.wells, load)


def _stored_load(dataset_id: int):
    """A ``LoadResult`` rebuilt from a dataset kept in the store."""
    from core.production import LoadResult

    ds = _store().load_dataset(dataset_id)
    return LoadResult(
        production=ds.production, wells=ds.wells if ds.wells is not None else pd.DataFrame(),
        report=ds.report if ds.report is not None else pd.DataFrame(), mapping=dict(ds.mapping or {}),
        rows_read=ds.rows_read, rows_used=ds.rows_used, rows_rejected=ds.rows_rejected, file_name=ds.file_name,
        content_sha256=ds.content_sha256, pressure_kind=ds.pressure_kind, messages=list(ds.messages or []),
    )


def current_load():
    """The current :class:`core.production.LoadResult`, or raise :class:`InputError`.

    Bad files give an ``InputError`` with one clear message (from the loader); the page shows
    it. The load is cached on the file hashes, mapping and input units.
    """
    src = current_source()
    if src is None:
        raise InputError("no production data loaded yet: upload a file or open the sample field")
    ss = st.session_state
    settings = ss[SETTINGS]
    return _cached_load(load_key(), src, dict(ss[MAPPING]), settings.get("units", "field"),
                        settings.get("unit_column"), ss[PRESSURE_KIND], ss.get(APPEND))[0]


def merge_report():
    """The monthly update's merge report (``core.changes.merge_production``), None when the
    file is not appended to a stored history."""
    src = current_source()
    ss = st.session_state
    if src is None or ss.get(APPEND) is None:
        return None
    return _cached_load(load_key(), src, dict(ss[MAPPING]), ss[SETTINGS].get("units", "field"),
                        ss[SETTINGS].get("unit_column"), ss[PRESSURE_KIND], ss.get(APPEND))[1]


def stored_history() -> dict[str, Any] | None:
    """The latest dataset kept in the store for the current field (without its tables), or
    None: ``id``, ``file_name``, ``last_month``, ``rows_used``."""
    src = current_source()
    store = _store()
    if store is None or src is None or src.kind == "stored":
        return None
    try:
        d = store.list_datasets(store_field())
    except (ValueError, OSError):
        return None
    d = d.loc[d["content_sha256"] != src.sha256] if "content_sha256" in d else d
    if d.empty:
        return None
    top = d.sort_values("id").iloc[-1]
    return {"id": int(top["id"]), "file_name": str(top["file_name"]), "last_month": month_text(top.get("last_month")),
            "rows_used": int(top.get("rows_used", 0))}


def set_pressure_kind(kind: str) -> None:
    """What the file's pressure column holds (a loader option); the file is read again."""
    st.session_state[PRESSURE_KIND] = kind
    st.session_state[CONFIRMED] = None


def set_append(dataset_id: int | None) -> None:
    """Append the current file to a stored dataset's history (monthly update), or not."""
    if st.session_state.get(APPEND) != dataset_id:
        st.session_state[APPEND] = dataset_id
        st.session_state[CONFIRMED] = None


def _reopen_last_kept_run() -> None:
    """On a session's first start: reopen the newest run kept in the store (its dataset and
    settings; the forecast is recomputed from them) so a closed tab or a new team member sees
    the team's last run. Without a kept run the bundled sample stays."""
    store = _store()
    if store is None:
        return
    try:
        runs = store.list_runs()
        runs = runs.loc[runs["dataset_id"].notna()]
        if runs.empty:
            return
        top = runs.sort_values("id").iloc[-1]
        kept = store.load_run(int(top["id"]))
        ds = store.list_datasets()
        ds = ds.loc[ds["id"] == int(top["dataset_id"])].iloc[0]
    except (ValueError, OSError, IndexError) as exc:
        st.session_state[LAST_ERROR] = f"the last kept run could not be reopened: {exc}"
        return
    ss = st.session_state
    ss[SOURCE] = Source("stored", str(ds["file_name"]), b"", f"stored:{int(ds['id'])}:{ds['content_sha256']}",
                        dataset_id=int(ds["id"]))
    ss[MAPPING] = {}
    ss[SETTINGS] = kept.run_settings().as_dict()
    ss["dd_store_field_override"] = str(kept.field_key)
    ss[CONFIRMED] = load_key()
    ss["dd_reopened"] = f"run {int(top['id'])} of field {kept.field_key}"


def reopened_note() -> str | None:
    return st.session_state.get("dd_reopened")


def file_columns() -> list[str]:
    """Column headers of the current production file (read with ``core.production.read_table``)."""
    src = current_source()
    return _file_columns(src.sha256, src)


@st.cache_data(max_entries=8, show_spinner=False)
def _file_columns(sha: str, _src: Source) -> list[str]:
    from core.production import read_table

    try:
        return [str(c) for c in read_table(_src.content, file_name=_src.name, nrows=5).frame.columns]
    except InputError:
        return []


def canonical_columns() -> list[str]:
    """Canonical input columns the loader recognises (production file and well header)."""
    from core.production import CANONICAL_FIELDS

    return list(CANONICAL_FIELDS)


def mapping_table(load) -> pd.DataFrame:
    """The recognised mapping as a two-column table (canonical column, file column)."""
    cols = canonical_columns()
    rows = [(c, load.mapping.get(c, "")) for c in cols]
    rows += [(c, v) for c, v in load.mapping.items() if c not in cols]
    return pd.DataFrame(rows, columns=["canonical column", "file column"])


def confirm_current_load() -> None:
    st.session_state[CONFIRMED] = load_key()


def is_confirmed() -> bool:
    key = load_key()
    return key is not None and st.session_state.get(CONFIRMED) == key


# ---- settings ---------------------------------------------------------------------------------
def apply_settings(values: dict[str, Any]) -> None:
    """Validate new settings through ``core.run.RunSettings`` and store them.

    Raises :class:`InputError` with core's message when a value is out of range.
    """
    from core.run import RunSettings

    names = {f.name for f in dataclasses.fields(RunSettings)}
    merged = dict(st.session_state[SETTINGS])
    merged.update({k: v for k, v in values.items() if k in names})
    validated = RunSettings(**merged)  # raises InputError with one message
    st.session_state[SETTINGS] = validated.as_dict()


def settings() -> dict[str, Any]:
    return dict(st.session_state[SETTINGS])


# ---- overrides ---------------------------------------------------------------------------------
def _override_key(overrides: dict) -> str:
    items = []
    for w in sorted(overrides):
        o = overrides[w]
        d = dataclasses.asdict(o)
        d.pop("author", None)
        d.pop("reason", None)
        items.append((w, json.dumps(d, default=str, sort_keys=True)))
    return json.dumps(items)


def make_override(*, model: str | None, b: float | None, fit_start: Any, fit_end: Any,
                  exclude_months: Iterable[Any], reason: str, author: str):
    """A :class:`core.decline.WellOverride` from the form's values (reason required)."""
    from core.decline import WellOverride

    if not reason or not reason.strip():
        raise InputError("an override needs a reason: say why the machine's fit is overruled")

    def month(v):
        return None if v is None or v == "" else pd.Timestamp(v)

    return WellOverride(
        model=model or None,
        b=None if b is None else float(b),
        fit_start=month(fit_start),
        fit_end=month(fit_end),
        exclude_months=tuple(sorted(pd.Timestamp(m) for m in exclude_months)),
        reason=reason.strip(),
        author=(author or "").strip() or "unnamed",
    )


def apply_override(well_id: str, override) -> None:
    """Apply an override to a well and record it (store when available, else session)."""
    st.session_state[OVERRIDES] = {**st.session_state[OVERRIDES], well_id: override}
    entry = {
        "time": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC"),
        "well_id": well_id,
        "action": "applied",
        **{k: (", ".join(m.strftime("%Y-%m") for m in v) if k == "exclude_months" else v)
           for k, v in dataclasses.asdict(override).items()},
    }
    _record_override(entry, override, well_id)


def clear_override(well_id: str, reason: str = "", author: str = "") -> None:
    """Remove a well's override (the removal is recorded, the trail kept)."""
    if well_id not in st.session_state[OVERRIDES]:
        return
    rest = dict(st.session_state[OVERRIDES])
    rest.pop(well_id)
    st.session_state[OVERRIDES] = rest
    entry = {
        "time": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC"),
        "well_id": well_id, "action": "removed", "reason": reason or "override removed",
        "author": author or "unnamed",
    }
    _record_override(entry, None, well_id)


OVERRIDE_PROBLEM = "dd_override_problem"  # message of a refused override, shown once by the page
_MODELS = ("exponential", "hyperbolic", "harmonic")


def on_override_submit(well_id: str) -> None:
    """Callback of the override form: build the override from the form's widgets and apply it
    (or keep core's / our message for the page). Runs before the page script, so the page
    is drawn once, with the new forecast."""
    ss = st.session_state

    def val(key: str, default: Any = None) -> Any:
        v = ss.get(key, default)
        return None if v == "automatic" else v

    try:
        new = make_override(
            model=val("ov_model") if val("ov_model") in _MODELS else None,
            b=ss.get("ov_b") if ss.get("ov_fix_b") else None,
            fit_start=val("ov_start"), fit_end=val("ov_end"), exclude_months=ss.get("ov_exclude") or (),
            reason=ss.get("ov_reason", ""), author=ss.get("ov_author", ""),
        )
    except InputError as exc:
        ss[OVERRIDE_PROBLEM] = str(exc)
        return
    apply_override(well_id, new)


def on_override_remove(well_id: str) -> None:
    """Callback of the remove button: the removal is recorded, the trail kept."""
    clear_override(well_id, reason="override removed on the Well review page",
                   author=st.session_state.get("ov_author", ""))


def override_for(well_id: str):
    return st.session_state[OVERRIDES].get(well_id)


def override_log(well_id: str | None = None) -> pd.DataFrame:
    """The override audit trail (append-only, from the store; this session's when no store)."""
    store = _store()
    if store is not None:
        try:
            log = store.override_history(store_field(), well_id)
            log = log.assign(value=log["value"].map(lambda v: "" if v is None else str(v)),
                             entered_at=log["entered_at"].dt.strftime("%Y-%m-%d %H:%M:%S UTC"))
            return log[["entered_at", "well_id", "what", "value", "entry_type", "reason", "author"]]
        except (ValueError, OSError) as exc:
            st.session_state[LAST_ERROR] = f"the override record could not be read: {exc}"
    log = pd.DataFrame(st.session_state[OVERRIDE_LOG])
    if well_id is not None and not log.empty:
        log = log.loc[log["well_id"] == well_id]
    return log


# ---- flags -------------------------------------------------------------------------------------
FLAG_WORD = "waterflood_planning"


def add_flag(kind: str, target: str, note: str, author: str = "") -> None:
    """Flag a unit or a well for waterflood planning with a note (kept in the store)."""
    if kind not in ("unit", "well"):
        raise InputError(f"a flag is for a 'unit' or a 'well', got {kind!r}")
    if not note or not note.strip():
        raise InputError("a waterflood planning flag needs a note")
    author = (author or "").strip() or "unnamed"
    entry = {
        "time": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC"),
        "kind": kind, "target": str(target), "note": note.strip(), "author": author,
    }
    store = _store()
    if store is not None:
        try:
            store.set_flag(store_field(), kind, str(target), flag=FLAG_WORD, note=entry["note"], author=author)
            return
        except (ValueError, OSError) as exc:
            st.session_state[LAST_ERROR] = f"flag kept in this session only: {exc}"
    st.session_state[FLAGS] = [*st.session_state[FLAGS], entry]


def flags_table() -> pd.DataFrame:
    """The current waterflood planning flags (latest entry per unit or well)."""
    cols = ["time", "kind", "target", "note", "author"]
    store = _store()
    if store is not None:
        try:
            f = store.current_flags(store_field())
            f = f.loc[f["flag"] == FLAG_WORD]
            out = pd.DataFrame({
                "time": f["entered_at"].dt.strftime("%Y-%m-%d %H:%M:%S UTC"), "kind": f["scope"],
                "target": f["target"], "note": f["note"], "author": f["author"],
            })
            return pd.concat([out, pd.DataFrame(st.session_state[FLAGS], columns=cols)], ignore_index=True)
        except (ValueError, OSError) as exc:
            st.session_state[LAST_ERROR] = f"flags could not be read from the store: {exc}"
    return pd.DataFrame(st.session_state[FLAGS], columns=cols)


# ---- the store (core.storage) ---------------------------------------------------------------
#: Environment variable naming the store (SQLite file or folder, or a database URL); default
#: the data folder of ``core.storage.default_data_folder`` ($DEPLETION_DESK_DATA).
STORE_ENV = "DEPLETION_DESK_DB"
STORE_FIELD = "dd_store_field"  # field name the session's records are kept under
_OVERRIDE_WHATS = ("model", "b", "fit_start", "fit_end", "exclude_months")


@st.cache_resource(show_spinner=False)
def _open_store(location: str | None):
    from core.storage import open_store

    return open_store(location or None)


def _store():
    """The shared store, or None when it cannot be opened (the reason is shown once)."""
    try:
        from core.storage import default_data_folder

        return _open_store(os.environ.get(STORE_ENV) or str(default_data_folder()))
    except (ImportError, ValueError, OSError) as exc:
        st.session_state[LAST_ERROR] = f"the store cannot be opened ({exc}); overrides and flags are kept in this session only"
        return None


def store_field() -> str:
    """Field name the session's records are kept under (from the production file's name)."""
    src = current_source()
    if src is None:
        return "field"
    if src.kind == "stored" and st.session_state.get("dd_store_field_override"):
        return st.session_state["dd_store_field_override"]
    try:
        from core.storage import default_field_name

        return default_field_name(src.name)
    except ImportError:
        return src.name


def _record_override(entry: dict, override, well_id: str) -> None:
    st.session_state[OVERRIDE_LOG] = [*st.session_state[OVERRIDE_LOG], entry]
    store = _store()
    if store is None:
        return
    field, author = store_field(), entry.get("author") or "unnamed"
    reason = entry.get("reason") or "override removed"
    try:
        previous = store.well_overrides(field).get(well_id)
        for what in _OVERRIDE_WHATS:
            value = None if override is None else getattr(override, what)
            if what == "exclude_months" and value is not None:
                value = [pd.Timestamp(m).strftime("%Y-%m") for m in value] or None
            if value is not None:
                store.add_override(field, well_id, what, value, reason=reason, author=author)
            elif previous is not None and getattr(previous, what) not in (None, ()):
                store.clear_override(field, well_id, what, reason=reason, author=author)
    except (ValueError, OSError) as exc:
        st.session_state[LAST_ERROR] = f"override kept in this session only: {exc}"


def _restore_from_store() -> None:
    """Take the store's overrides and flags for the current field into the session (once per
    field), so a reopened app or a new tab shows the team's work."""
    ss = st.session_state
    field = store_field()
    if ss.get(STORE_FIELD) == field:
        return
    ss[STORE_FIELD] = field
    store = _store()
    if store is None:
        return
    try:
        ss[OVERRIDES] = dict(store.well_overrides(field))
    except (ValueError, OSError) as exc:
        ss[LAST_ERROR] = f"overrides could not be read from the store: {exc}"


def pop_problem() -> str | None:
    """The last problem met with the store or a record (then forgotten), or None."""
    return st.session_state.pop(LAST_ERROR, None)


def store_status() -> str:
    store = _store()
    return "session only (the store cannot be opened)" if store is None else f"kept in the store ({store.location})"


# ---- the run -----------------------------------------------------------------------------------
#: Settings that change only the forecast and its economics, not the fits or the stages
#: (``core.run.rerun_forecast`` recomputes the forecast from the kept fits when they change).
FORECAST_ONLY_SETTINGS = (
    "econ_limit_bopd", "econ_limit_mcfd", "oil_price", "gas_price", "opex_per_month", "nri", "wi",
    "severance_tax", "horizon_years",
)


def _settings_key(exclude: Iterable[str] = ()) -> str:
    s = {k: v for k, v in st.session_state[SETTINGS].items() if k not in set(exclude)}
    return json.dumps(s, sort_keys=True, default=str)


def run_key() -> str | None:
    lk = load_key()
    if lk is None:
        return None
    return "|".join([lk, _settings_key(), _override_key(st.session_state[OVERRIDES])])


def _base_key() -> str:
    """Load and settings without the overrides: runs that differ only in overrides."""
    return "|".join([str(load_key()), _settings_key()])


def _forecast_only_settings() -> tuple[str, ...]:
    import core.run as core_run

    return tuple(getattr(core_run, "FORECAST_SETTINGS", FORECAST_ONLY_SETTINGS))


def _fit_key() -> str:
    """Load, fit-affecting settings and overrides: runs that differ only in forecast settings
    (``core.run.FORECAST_SETTINGS`` when core names them, else :data:`FORECAST_ONLY_SETTINGS`)."""
    return "|".join([str(load_key()), _settings_key(_forecast_only_settings()),
                     _override_key(st.session_state[OVERRIDES])])


class _LRU:
    """A small thread-safe least-recently-used map shared by all sessions (st.cache_resource)."""

    def __init__(self, size: int) -> None:
        import threading
        from collections import OrderedDict

        self.size = size
        self.items: OrderedDict[str, Any] = OrderedDict()
        self.lock = threading.Lock()

    def get(self, key: str) -> Any:
        with self.lock:
            if key in self.items:
                self.items.move_to_end(key)
                return self.items[key]
        return None

    def put(self, key: str, value: Any) -> None:
        with self.lock:
            self.items[key] = value
            self.items.move_to_end(key)
            while len(self.items) > self.size:
                self.items.popitem(last=False)


@st.cache_resource(show_spinner=False)
def _runs() -> _LRU:
    # Runs are held here rather than by decorating the run call, so that the progress bar
    # drawn while a run is computed is not recorded and replayed by Streamlit's cache.
    return _LRU(RUN_CACHE_SIZE)


@st.cache_resource(show_spinner=False)
def _lineage() -> _LRU:
    # base key / fit key -> (run key, overrides) of the newest run computed with them: the
    # starting point of an incremental step (an override, or a forecast-only setting).
    return _LRU(4 * RUN_CACHE_SIZE)


RUN_CACHE_SIZE = 8

#: How the newest run of this session was computed ("full run", "re-run of N wells",
#: "forecast re-run"), and its wall time [s]; shown by the benchmark and the tests.
RUN_PATH = "dd_run_path"


def _compute_run(load, settings_obj, overrides: dict, progress: Callable | None):
    from core.run import run_field

    return run_field(load, settings=settings_obj, overrides=overrides or None, progress=progress)


def _override_items(overrides: dict) -> dict[str, str]:
    return dict(json.loads(_override_key(overrides)))


def changed_wells(before: dict, after: dict) -> list[str]:
    """Wells whose override differs between two override sets (added, removed or changed;
    reason and author do not count: they do not change the numbers)."""
    a, b = _override_items(before), _override_items(after)
    return sorted(w for w in set(a) | set(b) if a.get(w) != b.get(w))


def _incremental_run(load, settings_obj, overrides: dict):
    """The run from a cached one by ``core.run``'s incremental steps, when core has them and a
    suitable run is cached; else None (the caller runs the whole field).

    * an override set that differs from a cached run's (same load and settings) only for some
      wells: ``core.run.rerun_wells`` re-fits and re-forecasts those wells;
    * settings that differ from a cached run's (same load, fit settings and overrides) only
      in the economic limit inputs or the horizon: ``core.run.rerun_forecast`` keeps the fits
      and stages and recomputes the forecast.
    Either gives the numbers of a full ``run_field`` with the same inputs (core's contract).
    """
    import core.run as core_run

    cache, lineage = _runs(), _lineage()
    if hasattr(core_run, "rerun_wells"):
        hit = lineage.get("base|" + _base_key())
        prev = None if hit is None else cache.get(hit[0])
        if prev is not None:
            wells = changed_wells(hit[1], overrides)
            if wells:
                try:
                    run = core_run.rerun_wells(prev, load, settings=settings_obj, overrides=overrides or None,
                                               wells=wells)
                except ValueError:  # core refuses the step (it names why): run the whole field
                    return None
                return run, f"re-run of {len(wells)} well{'s' if len(wells) != 1 else ''}"
    if hasattr(core_run, "rerun_forecast"):
        hit = lineage.get("fit|" + _fit_key())
        prev = None if hit is None else cache.get(hit[0])
        if prev is not None:
            try:
                run = core_run.rerun_forecast(prev, load, settings=settings_obj, overrides=overrides or None)
            except ValueError:
                return None
            return run, "forecast re-run"
    return None


def has_run() -> bool:
    """True when the current inputs have been confirmed (a run can be shown)."""
    return is_confirmed()


def cached_run():
    """The current run when it is already computed, else None (never computes)."""
    if not is_confirmed():
        return None
    return _runs().get(run_key())


def current_run(progress: Callable[[float, str], None] | None = None):
    """The :class:`core.run.RunResult` for the current load, settings and overrides.

    Returns None until the user has confirmed the load. Raises :class:`InputError` for a
    file or setting that cannot be used. Computed once per input change, then cached; an
    override or a forecast-only setting change starts from the cached run through core's
    incremental steps when core has them (:func:`_incremental_run`).
    """
    import time

    if not is_confirmed():
        return None
    key = run_key()
    cache = _runs()
    run = cache.get(key)
    if run is not None:
        return run
    load = current_load()
    ss = st.session_state
    overrides = dict(ss[OVERRIDES])
    settings_obj = _settings_obj()
    t0 = time.perf_counter()
    step = _incremental_run(load, settings_obj, overrides)
    if step is None:
        run, path = _compute_run(load, settings_obj, overrides, progress), "full run"
    else:
        run, path = step
    ss[RUN_PATH] = (path, time.perf_counter() - t0)
    cache.put(key, run)
    lineage = _lineage()
    lineage.put("base|" + _base_key(), (key, overrides))
    lineage.put("fit|" + _fit_key(), (key, overrides))
    return run


# ---- probabilistic forecasts (P90 / P50 / P10) ----------------------------------------------------
PROB_SAMPLES = "dd_prob_samples"  # bootstrap samples per well; 0 = probabilistic forecasts off
PROB_SEED = "dd_prob_seed"
#: Default samples: 0 (off), so the first pages stay fast; the Settings page turns them on.
DEFAULT_PROB_SAMPLES = 0
#: Samples the Settings page suggests when they are turned on (core's default).
SUGGESTED_PROB_SAMPLES = 200
#: Fewest samples core accepts (``core.probabilistic.probabilistic_field``).
MIN_PROB_SAMPLES = 20

PROB_WORDING = (
    "P90 is the low estimate (90 % probability of exceeding it), P50 the median, P10 the high "
    "estimate (10 % probability of exceeding it)."
)


def prob_settings() -> tuple[int, int]:
    """(samples, seed) of the probabilistic forecast; samples 0 = off."""
    ss = st.session_state
    return int(ss.get(PROB_SAMPLES, DEFAULT_PROB_SAMPLES)), int(ss.get(PROB_SEED, 0))


def check_prob_settings(samples: int, seed: int) -> tuple[int, int]:
    """Raise :class:`InputError` unless samples are 0 (off) or at least core's minimum and the
    seed is a whole number >= 0; returns them as ints."""
    samples, seed = int(samples), int(seed)
    if samples != 0 and samples < MIN_PROB_SAMPLES:
        raise InputError(f"probabilistic samples must be 0 (off) or at least {MIN_PROB_SAMPLES}, got {samples}")
    if seed < 0:
        raise InputError(f"the seed must be a whole number >= 0, got {seed}")
    return samples, seed


def apply_prob_settings(samples: int, seed: int) -> None:
    """Set the probabilistic samples (0 = off, else at least core's minimum) and the seed."""
    samples, seed = check_prob_settings(samples, seed)
    st.session_state[PROB_SAMPLES] = samples
    st.session_state[PROB_SEED] = seed


def prob_key() -> str | None:
    samples, seed = prob_settings()
    rk = run_key()
    return None if rk is None or samples == 0 else f"{rk}|samples={samples}|seed={seed}"


@st.cache_resource(show_spinner=False)
def _probs() -> _LRU:
    return _LRU(4)


def cached_probabilistic(run):
    """The P90/P50/P10 result of the current run when computed (never computes), else None."""
    hit = _prob_entry(run)
    return None if hit is None else hit[1]


def prob_run(run):
    """The run with the P90/P50/P10 columns (core's run with ``samples`` set) when computed,
    else None: what the Downloads page exports once the percentiles are computed."""
    hit = _prob_entry(run)
    return None if hit is None else hit[0]


def _prob_entry(run):
    key = prob_key()
    if key is None:
        return None
    own = getattr(run, "probabilistic", None)  # a run that carries its own
    if own is not None and getattr(own, "samples", None) == prob_settings()[0]:
        return run, _prob_view(run)
    return _probs().get(key)


def _prob_view(prun):
    """``prun.probabilistic`` with its per-well table taken from the run's wells table (every
    well, gas wells at their deterministic volumes, as core's run reports them)."""
    from core.run import PROB_WELLS_COLUMNS

    cols = ["well_id"] + [c for c in PROB_WELLS_COLUMNS if c in prun.wells.columns]
    return dataclasses.replace(prun.probabilistic, wells=prun.wells[cols].reset_index(drop=True))


def _core_runs_probabilistic() -> bool:
    import core.run as core_run

    return "samples" in {f.name for f in dataclasses.fields(core_run.RunSettings)}


def compute_probabilistic(run, progress: Callable[[float, str], None] | None = None):
    """The P90/P50/P10 of the current run, cached on the run key, the samples and the seed.

    When ``core.run`` takes ``samples`` (its run wires ``core.probabilistic`` in, as the batch
    command does), the run is re-forecast with them by ``core.run.rerun_forecast`` (the fits
    kept; a full ``run_field`` if core refuses the step), so the dashboard's percentiles and
    downloads equal the batch command's. Otherwise ``core.probabilistic.probabilistic_field``
    is called on the run's inputs (history to the as-of month, the run's fits, the decline
    settings ``core.run.decline_settings`` makes, the overrides, the regime starts; level
    error measured first by ``calibrate_level_error``, as ``level_error="auto"`` does).
    """
    key = prob_key()
    if key is None:
        return None
    hit = _prob_entry(run)
    if hit is not None:
        return hit[1]
    samples, seed = prob_settings()
    prog = progress or (lambda f, m: None)
    load = current_load()
    overrides = dict(st.session_state[OVERRIDES]) or None
    if _core_runs_probabilistic():
        import core.run as core_run

        new = dataclasses.replace(run.settings, samples=samples, seed=seed)
        prog(0.05, f"bootstrapping {len(run.wells):,} wells x {samples} samples (with the level error's hindcast)")
        try:
            if not hasattr(core_run, "rerun_forecast"):
                raise ValueError("no forecast re-run in core")
            prun = core_run.rerun_forecast(run, load, settings=new, overrides=overrides)
        except ValueError:
            prun = core_run.run_field(load, settings=new, overrides=overrides, progress=progress)
        prog(1.0, "P90/P50/P10 computed")
        entry = (prun, _prob_view(prun))
        _probs().put(key, entry)
        return entry[1]
    from core.probabilistic import calibrate_level_error, probabilistic_field
    from core.run import decline_settings

    prod = load.production
    if run.as_of is not None:
        prod = prod[prod["month"] <= pd.Timestamp(run.as_of)]
    dsettings = decline_settings(run.settings)
    regime = run.stages.set_index("well_id")["regime_start"] if "regime_start" in run.stages else None
    prog(0.05, "measuring the level error by a hindcast of the last 24 months")
    cal = calibrate_level_error(prod, settings=dsettings, seed=seed, regime_start=regime, overrides=overrides)
    prog(0.45, f"bootstrapping {len(run.wells):,} wells x {samples} samples")
    res = probabilistic_field(prod, run.fits, settings=dsettings, samples=samples, seed=seed, as_of=run.as_of,
                              overrides=overrides, level_error=cal, regime_start=regime)
    prog(1.0, "P90/P50/P10 computed")
    _probs().put(key, (None, res))
    return res


def probabilistic_controls(run, *, where: str):
    """The page's P90/P50/P10 control: off (a note), not yet computed (a button), or the
    result. Returns the :class:`core.probabilistic.ProbabilisticResult` or None."""
    samples, seed = prob_settings()
    if samples == 0:
        st.caption("Probabilistic forecasts (P90/P50/P10) are off: set the number of samples on the Settings page.")
        return None
    res = cached_probabilistic(run)
    if res is not None:
        return res
    n = len(run.wells)
    slot = st.empty()  # the button goes once the result is drawn
    if slot.button(f"Compute P90/P50/P10 ({n:,} wells x {samples} samples)", key=f"prob_compute_{where}"):
        slot.empty()
        bar = st.progress(0.0, text="Probabilistic forecast")
        try:
            res = compute_probabilistic(run, progress=lambda f, m: bar.progress(min(max(float(f), 0.0), 1.0), text=m))
        except ValueError as exc:
            bar.empty()
            st.error(f"The probabilistic forecast could not be computed: {exc}")
            return None
        bar.empty()
        return res
    st.caption(f"Moving-block bootstrap of each well's decline fit with a hindcast-measured level error "
               f"(core.probabilistic); {PROB_WORDING}")
    return None


PROB_WELL_COLUMNS = [
    "eur_oil_bbl_p90", "eur_oil_bbl_p50", "eur_oil_bbl_p10",
    "remaining_oil_bbl_p90", "remaining_oil_bbl_p50", "remaining_oil_bbl_p10",
    "econ_limit_date_p90", "econ_limit_date_p50", "econ_limit_date_p10",
]


def prob_well_row(prob, well_id: str) -> pd.Series | None:
    """The well's row of ``ProbabilisticResult.wells`` (None when not there)."""
    if prob is None:
        return None
    w = prob.wells
    hit = w.loc[w["well_id"].astype(str) == str(well_id)]
    return None if hit.empty else hit.iloc[0]


def prob_well_band(prob, well_id: str) -> pd.DataFrame | None:
    """The well's P90/P50/P10 forecast months as calendar-day rates [bbl/d] (``month``,
    ``rate_p90``, ``rate_p50``, ``rate_p10``), or None."""
    from dashboard.charts import calendar_day_rates

    if prob is None or prob.monthly.empty:
        return None
    m = prob.monthly
    return calendar_day_rates(m.loc[m["well_id"].astype(str) == str(well_id)])


def prob_field_band(prob, run=None) -> pd.DataFrame | None:
    """The field's P90/P50/P10 oil per forecast month (sample-wise sums over wells) as
    calendar-day rates [bbl/d], or None.

    Gas and condensate wells are forecast on their gas decline; core's run adds their
    deterministic oil to ``field_monthly`` (a constant in every sample), so the band and the
    field forecast line count the same wells. ``run`` is accepted for older callers.
    """
    from dashboard.charts import calendar_day_rates

    if prob is None or prob.field_monthly.empty:
        return None
    return calendar_day_rates(prob.field_monthly)


def prob_field_totals(prob) -> pd.DataFrame:
    """Field totals of ``ProbabilisticResult.field``: ``quantity``, ``p90``, ``p50``, ``p10``,
    ``mean`` [bbl], and the method in words."""
    return prob.field


def prob_column_config() -> dict:
    """Column labels of the P90/P50/P10 columns of the well table."""
    out = {}
    for q, name in (("eur_oil_bbl", "EUR"), ("remaining_oil_bbl", "remaining")):
        for p, word in (("p90", "P90 low"), ("p50", "P50"), ("p10", "P10 high")):
            out[f"{q}_{p}"] = st.column_config.NumberColumn(f"{name} {word} [bbl]", format="localized")
    return out


PROB_HEADS = {"p90": "P90 (low)", "p50": "P50", "p10": "P10 (high)"}


def prob_well_ranges(prow: pd.Series) -> pd.DataFrame:
    """The well's P90/P50/P10 as a small table: EUR and remaining oil [bbl], economic-limit
    month (P90 the early month; "beyond horizon" when that share of samples reaches the cap)."""
    rows = []
    for label, q in (("EUR oil [bbl]", "eur_oil_bbl"), ("Remaining oil [bbl]", "remaining_oil_bbl")):
        rows.append([label] + [number_text(prow[f"{q}_{p}"]) for p in PROB_HEADS])
    rows.append(["Economic-limit month"] + [month_text(prow[f"econ_limit_date_{p}"]) or "beyond horizon" for p in PROB_HEADS])
    return pd.DataFrame(rows, columns=["quantity", *PROB_HEADS.values()])


def prob_field_ranges(prob) -> pd.DataFrame:
    """The field totals of ``ProbabilisticResult.field`` as a small table [bbl]."""
    f = prob.field
    names = {"remaining_oil_bbl": "Remaining oil [bbl]", "eur_oil_bbl": "EUR oil [bbl]"}
    rows = [[names.get(r["quantity"], r["quantity"])] + [number_text(r[p]) for p in PROB_HEADS] + [number_text(r["mean"])]
            for _, r in f.iterrows()]
    return pd.DataFrame(rows, columns=["quantity", *PROB_HEADS.values(), "mean"])


def prob_range_text(low: Any, mid: Any, high: Any, fmt: str = "{:,.0f}") -> str:
    """'P90 / P50 / P10' values as one line."""
    return " / ".join(number_text(v, fmt) for v in (low, mid, high))


# ---- views of a run (cached on the run key) -----------------------------------------------------
def headline(run) -> dict[str, Any]:
    """Headline figures of a run, from ``RunResult.summary`` and the wells table."""
    s = dict(run.summary or {})
    w = run.wells
    out = {
        "wells": s.get("wells_read", len(w)),
        "wells_forecast": s.get("wells_forecast", None),
        "oil_rate_now_bopd": s.get("oil_rate_now_bopd", _sum(w, "last_oil_rate_bopd")),
        "cum_oil_bbl": s.get("cum_oil_bbl_total", _sum(w, "cum_oil_bbl")),
        "remaining_oil_bbl": s.get("remaining_oil_bbl_total", _sum(w, "remaining_oil_bbl")),
        "eur_oil_bbl": s.get("eur_oil_bbl_total", _sum(w, "eur_oil_bbl")),
        "wells_past_gor_peak": s.get("wells_past_gor_peak", int(w["passed_gor_peak"].fillna(False).astype(bool).sum())),
    }
    return out


def _sum(frame: pd.DataFrame, column: str) -> float:
    return float(frame[column].sum(skipna=True)) if column in frame else float("nan")


def planning_counts(run) -> pd.DataFrame:
    """Wells per planning status (table for the bar chart)."""
    c = run.wells["planning_status"].fillna("not_applicable").value_counts()
    order = ["window_ahead", "window_open", "window_closing", "window_passed", "not_applicable"]
    c = c.reindex([s for s in order if s in c.index] + [s for s in c.index if s not in order])
    return pd.DataFrame({"planning_status": c.index, "wells": c.to_numpy()})


WELL_TABLE_COLUMNS = [
    "well_id", "unit", "fluid_type", "stage", "planning_status", "status", "model", "b",
    "qi_bopd", "di_annual_nominal", "cum_oil_bbl", "remaining_oil_bbl", "eur_oil_bbl",
    "econ_limit_date", "fit_rmse_log", "fit_criterion", "passed_gor_peak", "override",
]


PROB_TABLE_COLUMNS = ["eur_oil_bbl_p90", "eur_oil_bbl_p50", "eur_oil_bbl_p10",
                      "remaining_oil_bbl_p90", "remaining_oil_bbl_p50", "remaining_oil_bbl_p10"]


def well_table(run, *, units: Iterable[str] = (), stages: Iterable[Any] = (), statuses: Iterable[str] = (),
               fluids: Iterable[str] = (), search: str = "", prob=None) -> pd.DataFrame:
    """The well table, filtered by unit, stage, planning status, fluid type and well name;
    with ``prob`` (a ``ProbabilisticResult``), EUR and remaining P90/P50/P10 after the EUR."""
    w = run.wells
    if prob is not None:
        p = prob.wells.assign(well_id=prob.wells["well_id"].astype(str)).drop_duplicates("well_id").set_index("well_id")
        ids = w["well_id"].astype(str)
        w = w.assign(**{c: ids.map(p[c]).to_numpy(dtype=float) for c in PROB_TABLE_COLUMNS})
    keep = pd.Series(True, index=w.index)
    units, stages, statuses, fluids = list(units), list(stages), list(statuses), list(fluids)
    if units:
        keep &= w["unit"].isin(units)
    if stages:
        label = w["stage"].astype("string").fillna("n/a")
        keep &= label.isin([str(s) for s in stages])
    if statuses:
        keep &= w["planning_status"].isin(statuses)
    if fluids:
        keep &= w["fluid_type"].isin(fluids)
    if search:
        keep &= w["well_id"].astype(str).str.contains(search, case=False, regex=False)
    cols = [c for c in WELL_TABLE_COLUMNS if c in w]
    if prob is not None:
        at = cols.index("eur_oil_bbl") + 1 if "eur_oil_bbl" in cols else len(cols)
        cols[at:at] = [c for c in PROB_TABLE_COLUMNS if c in w]
    return w.loc[keep, cols].reset_index(drop=True)


def well_ids(run) -> list[str]:
    return run.wells["well_id"].astype(str).tolist()


def field_totals(run) -> pd.DataFrame:
    """Field oil rate per month from the run's monthly table: ``month``, ``kind``, ``oil_bbl``,
    ``oil_rate_bopd``.

    Every well's volume in a month is summed whatever its kind (a well whose history ends
    early is already forecast while others still report); months up to the run's as-of month
    are ``actual``, later ones ``forecast``, and the forecast line starts at the last actual
    month so the two join. The rate is the month's volume over its calendar days [bbl/d].
    """
    return _field_totals(run_key(), run)


@st.cache_data(max_entries=8, show_spinner=False)
def _field_totals(key: str, _run) -> pd.DataFrame:
    m = _run.monthly
    g = m.groupby("month", as_index=False, sort=True)["oil_bbl"].sum()
    g["oil_rate_bopd"] = g["oil_bbl"] / g["month"].dt.days_in_month
    as_of = pd.Timestamp(_run.as_of) if _run.as_of is not None else g["month"].max()
    actual = g.loc[g["month"] <= as_of].assign(kind="actual")
    forecast = g.loc[g["month"] >= as_of].assign(kind="forecast")
    return pd.concat([actual, forecast], ignore_index=True)


@st.cache_resource(show_spinner=False)
def _indices() -> _LRU:
    return _LRU(24)


def _well_slice(frame: pd.DataFrame, key: str, well_id: str) -> pd.DataFrame:
    """Rows of ``frame`` for one well through a per-table index of row positions (built once
    per table, then a lookup: switching wells does not scan the field's tables)."""
    cache = _indices()
    index = cache.get(key)
    if index is None:
        ids = frame["well_id"]
        codes = ids.cat.codes.to_numpy() if isinstance(ids.dtype, pd.CategoricalDtype) else None
        if codes is not None and (len(codes) < 2 or bool((codes[1:] >= codes[:-1]).all())):
            # rows grouped by well in category order (core's monthly table): a binary search
            # per lookup, nothing to build for a new run
            index = ("sorted", codes, {str(c): i for i, c in enumerate(ids.cat.categories)})
        else:
            index = {str(k): v for k, v in ids.groupby(ids, sort=False, observed=True).indices.items()}
        cache.put(key, index)
    if isinstance(index, tuple):
        _, codes, cats = index
        code = cats.get(str(well_id))
        if code is None:
            return frame.iloc[0:0]
        lo, hi = codes.searchsorted(code, "left"), codes.searchsorted(code, "right")
        return frame.iloc[lo:hi]
    pos = index.get(str(well_id))
    return frame.iloc[pos] if pos is not None else frame.iloc[0:0]


def _run_table_key(run, name: str) -> str:
    return f"{id(run)}|{name}|{run_key()}"


def well_row(run, well_id: str) -> pd.Series:
    return _well_slice(run.wells, _run_table_key(run, "wells"), well_id).iloc[0]


def well_history(well_id: str) -> pd.DataFrame:
    """The well's rows of the tidy monthly table (as loaded)."""
    load = current_load()
    return _well_slice(load.production, f"{id(load)}|production|{load_key()}", well_id)


def well_forecast(run, well_id: str) -> pd.DataFrame:
    """The well's forecast months: ``month``, ``rate`` [bbl/d], ``cum_oil_bbl``, ``oil_bbl``."""
    m = _well_slice(run.monthly, _run_table_key(run, "monthly"), well_id)
    return m.loc[m["kind"] == "forecast"].rename(columns={"oil_rate_bopd": "rate"})


def well_candidates(run, well_id: str) -> pd.DataFrame:
    c = run.candidates
    if c is None or c.empty or "well_id" not in c:
        return pd.DataFrame()
    return _well_slice(c, _run_table_key(run, "candidates"), well_id).reset_index(drop=True)


def fitted_curve(run, well_id: str, stream: str = "oil") -> pd.DataFrame:
    """The fitted Arps curve over the well's fit window: ``month``, ``rate`` [bbl/d or Mcf/d].

    Evaluated with ``core.decline``'s closed forms from the fit parameters in the wells table
    (qi at ``fit_start``, nominal di in 1/yr, b; the modified hyperbolic switches to the
    terminal decline). Time is measured from ``fit_start`` in years of 365.25 d, as in
    ``core.decline``.
    """
    from core import decline

    row = well_row(run, well_id)
    empty = pd.DataFrame(columns=["month", "rate"])
    if stream == "oil":
        qi, di, b, model = (row.get(c) for c in ("qi_bopd", "di_annual_nominal", "b", "model"))
        start, end = row.get("fit_start"), row.get("fit_end")
    else:
        # The gas stream has its own fit window: take it from the decline engine's fit table.
        fits = getattr(run, "fits", None)
        if fits is None or fits.empty or "stream" not in fits:
            return empty
        f = _well_slice(fits, _run_table_key(run, "fits"), well_id)
        f = f.loc[f["stream"] == "gas"]
        if f.empty:
            return empty
        f = f.iloc[0]
        qi, di, b, model, start, end = (f.get(c) for c in ("qi", "di", "b", "model", "fit_start", "fit_end"))
    if any(v is None or pd.isna(v) for v in (qi, di, start, end)):
        return empty
    months = pd.date_range(start, end, freq="MS")
    t_yr = (months - pd.Timestamp(start)).days.to_numpy() / decline.DAYS_PER_YEAR
    b = 0.0 if b is None or pd.isna(b) else float(b)
    term = row.get("terminal_decline_annual_effective")
    try:
        if model == "modified_hyperbolic" and b > 0 and term is not None and pd.notna(term):
            d_lim = decline.nominal_from_tangent_effective(float(term))
            rate = decline.modified_hyperbolic_rate(t_yr, float(qi), float(di), b, d_lim)
        else:
            rate = decline.arps_rate(t_yr, float(qi), float(di), b)
    except ValueError:
        return empty
    return pd.DataFrame({"month": months, "rate": rate})


def excluded_months(run, well_id: str) -> list[pd.Timestamp]:
    """Months left out of the well's fit: the engineer's exclusions plus any the engine reports."""
    out: list[pd.Timestamp] = []
    ov = override_for(well_id)
    if ov is not None:
        out += [pd.Timestamp(m) for m in ov.exclude_months]
    fits = getattr(run, "fits", None)
    if fits is not None and not fits.empty and "excluded_months" in fits:
        rows = fits.loc[fits["well_id"].astype(str) == str(well_id), "excluded_months"]
        for v in rows:
            if isinstance(v, (list, tuple)):
                out += [pd.Timestamp(m) for m in v]
    return sorted(set(out))


def well_stage_events(row: pd.Series) -> dict[str, Any]:
    """Detected dates to mark on the GOR/pressure chart."""
    return {
        "bubble point": row.get("bubble_point_date"),
        "GOR back above Rsi": row.get("stage2_end_date"),
        "GOR peak": row.get("gor_peak_date"),
    }


def unit_names(run) -> list[str]:
    return run.units["unit"].astype(str).tolist()


def unit_history_match(unit: str) -> dict[str, Any] | None:
    """The unit's material-balance history match (``core.history_match.history_match_unit``):
    ``expected`` (month, gor_scf_stb, pressure_psia of the fitted path), ``ooip_stb``,
    ``ooip_low_stb``, ``ooip_high_stb``, ``sgc``, ``recovery_factor_to_date`` and ``messages``;
    None with the reason in ``"error"`` when the unit cannot be matched. Cached per load."""
    return _unit_history_match(load_key(), str(unit))


@st.cache_data(max_entries=64, show_spinner="Matching the unit's material balance")
def _unit_history_match(key: str, unit: str) -> dict[str, Any]:
    import warnings

    from core.history_match import history_match_unit

    load = current_load()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # the match states its caveats in ``messages``
            m = history_match_unit(load.production, load.wells, unit)
    except ValueError as exc:
        return {"error": str(exc)}
    o = m.observed
    expected = pd.DataFrame({"month": o["month"], "gor_scf_stb": o["gor_fit_scf_stb"],
                             "pressure_psia": o["pressure_fit_psia"]})
    return {
        "expected": expected, "ooip_stb": m.ooip_stb, "ooip_low_stb": m.ooip_low_stb,
        "ooip_high_stb": m.ooip_high_stb, "sgc": m.sgc, "recovery_factor_to_date": m.recovery_factor_to_date,
        "messages": list(m.messages),
    }


def unit_observed(unit: str) -> pd.DataFrame:
    """Observed unit history (``core.history_match.unit_history``): ``month``, ``gor_scf_stb``
    (unit gas over unit oil), ``pressure_psia`` (mean of the month's surveys)."""
    return _unit_observed(load_key(), str(unit))


@st.cache_data(max_entries=64, show_spinner=False)
def _unit_observed(key: str, unit: str) -> pd.DataFrame:
    from core.history_match import unit_history

    return unit_history(current_load().production, unit)


# ---- exports -----------------------------------------------------------------------------------
@st.cache_resource(show_spinner=False)
def _exports() -> _LRU:
    return _LRU(16)


def _deferred(kind: str, run, wells: Iterable[str] | None, name: str | None = None) -> Callable[[], bytes]:
    """A zero-argument callable building export bytes with ``core.export`` when the user clicks
    the download button (Streamlit runs it outside the page script), memoised per run."""
    cache = _exports()  # looked up in the script thread; the callable runs in another thread
    sel = None if wells is None else tuple(sorted(map(str, wells)))
    samples = getattr(run.settings, "samples", 0) if getattr(run, "probabilistic", None) is not None else 0
    key = (run_key(), kind, sel, samples, getattr(run.settings, "seed", 0))

    def build() -> bytes:
        from core.export import run_to_xlsx_bytes, tables_to_csv_bytes

        data = cache.get(str(key))
        if data is None:
            data = run_to_xlsx_bytes(run, wells=sel) if kind == "xlsx" else tables_to_csv_bytes(run, wells=sel)
            cache.put(str(key), data)
        return data if kind == "xlsx" else data[name]

    return build


def export_xlsx(run, wells: Iterable[str] | None) -> Callable[[], bytes]:
    """Deferred XLSX workbook bytes (cover sheet with inputs and cautions, then the tables)."""
    return _deferred("xlsx", run, wells)


def export_csv(run, wells: Iterable[str] | None) -> dict[str, Callable[[], bytes]]:
    """Deferred CSV bytes of the run's tables, keyed by file name (one well, a selection, or
    the field when ``wells`` is None)."""
    from core.export import CSV_FILES

    return {name: _deferred("csv", run, wells, name) for name in CSV_FILES.values()}


def flags_csv() -> bytes:
    from core.export import table_to_csv_bytes

    return table_to_csv_bytes(flags_table())


def version() -> str:
    return getattr(core, "__version__", "unknown")


# ---- page helpers ------------------------------------------------------------------------------
def require_run():
    """The current run for a page, or a note pointing to the Load data page (and stop).

    A run not yet cached (new settings or overrides) is computed here with a progress bar.
    """
    if current_source() is None or not is_confirmed():
        st.info("No forecast yet: load a file (or the sample field) and confirm it on the Load data page.")
        st.page_link("views/load.py", label="Go to Load data", icon=":material/upload_file:")
        st.stop()
    run = cached_run()
    if run is not None:
        return run
    bar = st.progress(0.0, text="Computing the forecast")

    def progress(frac: float, message: str) -> None:
        bar.progress(min(max(float(frac), 0.0), 1.0), text=message or "Computing the forecast")

    try:
        run = current_run(progress=progress)
    except InputError as exc:
        bar.empty()
        st.error(str(exc))
        st.stop()
    bar.empty()
    return run


def caution() -> None:
    """The caution shown wherever forecasts or planning statuses appear."""
    st.caption(f":warning: {CAUTION}")


def use_upload(production_file, header_file=None) -> None:
    """Make the uploaded files the session's data (hashed once per uploaded file)."""
    ids = (production_file.file_id, None if header_file is None else header_file.file_id)
    if st.session_state.get("dd_upload_ids") == ids:
        return
    st.session_state["dd_upload_ids"] = ids
    set_source(make_source(
        "upload", production_file.name, production_file.getvalue(),
        None if header_file is None else header_file.name,
        None if header_file is None else header_file.getvalue(),
    ))


def load_well_count(load) -> int:
    return int(load.production["well_id"].nunique()) if "well_id" in load.production else 0


def select_well(well_id: str) -> None:
    st.session_state[WELL] = str(well_id)


def selected_well(run) -> str | None:
    """The well on the Well review page; by default the first well with a depletion stage
    (an oil well under solution-gas drive), else the first well."""
    ids = well_ids(run)
    w = st.session_state.get(WELL)
    if w not in ids:
        staged = run.wells.loc[run.wells["stage"].notna(), "well_id"].astype(str)
        w = staged.iloc[0] if len(staged) else (ids[0] if ids else None)
        st.session_state[WELL] = w
    return w


OVERRIDE_FORM_KEYS = ("ov_model", "ov_fix_b", "ov_b", "ov_start", "ov_end", "ov_exclude", "ov_reason", "ov_author")


def on_well_pick() -> None:
    """Callback of the well picker: remember the well, reset the override form."""
    select_well(st.session_state["well_pick"])
    for k in OVERRIDE_FORM_KEYS:
        st.session_state.pop(k, None)


def text(value: Any) -> str:
    return "" if value is None or (not isinstance(value, str) and pd.isna(value)) else str(value)


def month_text(value: Any) -> str:
    return "" if value is None or pd.isna(value) else pd.Timestamp(value).strftime("%Y-%m")


def months_text(values: Iterable[Any]) -> list[str]:
    return [month_text(v) for v in values]


def month_choices(history: pd.DataFrame) -> list[str]:
    return months_text(history["month"])


def month_index(months: list[str], value: Any) -> int:
    m = month_text(value)
    return months.index(m) + 1 if m in months else 0


def stage_text(row: pd.Series) -> str:
    s = row.get("stage")
    return "n/a" if s is None or pd.isna(s) else str(int(s))


def fit_facts(row: pd.Series) -> pd.DataFrame:
    """The fit's parameters and quality figures from the wells table, as label/value rows."""
    labels = [
        ("model", "model"), ("fit window start", "fit_start"), ("fit window end", "fit_end"),
        ("fit window starts after", "fit_regime_source"), ("qi at fit start [bbl/d]", "qi_bopd"), ("di, nominal [1/yr]", "di_annual_nominal"), ("b", "b"),
        ("terminal decline, effective [1/yr]", "terminal_decline_annual_effective"),
        ("economic limit [bbl/d]", "econ_limit_bopd"), ("months used", "fit_months_used"),
        ("months excluded", "fit_months_excluded"), ("months down-weighted", "fit_months_down_weighted"),
        ("RMSE of ln rate", "fit_rmse_log"), ("choice criterion", "fit_criterion"),
        ("gas model", "gas_model"), ("override", "override"), ("status", "status"),
    ]
    rows = []
    for label, col in labels:
        if col not in row.index:
            continue
        v = row[col]
        if isinstance(v, pd.Timestamp):
            v = month_text(v)
        elif isinstance(v, float):
            v = "" if pd.isna(v) else f"{v:.4g}"
        rows.append((label, text(v)))
    return pd.DataFrame(rows, columns=["item", "value"])


# ---- unit planning -----------------------------------------------------------------------------
UNIT_TABLE_COLUMNS = [
    "unit", "stage", "stage_confidence", "planning_status", "n_wells", "share_stage_1", "share_stage_2",
    "share_stage_3", "share_stage_4", "share_not_applicable", "bubble_point_date", "months_since_bubble_point",
    "gor_peak_date", "months_to_gor_peak_est", "n_wells_past_gor_peak", "cum_oil_bbl", "remaining_oil_bbl",
    "eur_oil_bbl",
]


def units_table(run) -> pd.DataFrame:
    return run.units[[c for c in UNIT_TABLE_COLUMNS if c in run.units]]


def units_column_config() -> dict:
    share = {f"share_stage_{i}": st.column_config.NumberColumn(f"stage {i}", format="percent") for i in (1, 2, 3, 4)}
    return {
        **share,
        "share_not_applicable": st.column_config.NumberColumn("n/a", format="percent"),
        "bubble_point_date": st.column_config.DateColumn("bubble point", format="YYYY-MM"),
        "gor_peak_date": st.column_config.DateColumn("GOR peak", format="YYYY-MM"),
        "months_since_bubble_point": st.column_config.NumberColumn("months since bubble point", format="%.0f"),
        "months_to_gor_peak_est": st.column_config.NumberColumn("est. months to GOR peak", format="%.0f"),
        **volume_column_config(),
    }


def volume_column_config() -> dict:
    """Column labels of the oil volume columns shared by the well and unit tables."""
    return {
        "cum_oil_bbl": st.column_config.NumberColumn("cum oil [bbl]", format="localized"),
        "remaining_oil_bbl": st.column_config.NumberColumn("remaining [bbl]", format="localized"),
        "eur_oil_bbl": st.column_config.NumberColumn("EUR [bbl]", format="localized"),
    }


def selected_unit(run) -> str | None:
    names = unit_names(run)
    u = st.session_state.get(UNIT)
    if u not in names:
        # by default the first unit with a planning status (a solution-gas-drive oil unit)
        staged = run.units.loc[run.units["planning_status"] != "not_applicable", "unit"].astype(str)
        u = staged.iloc[0] if len(staged) else (names[0] if names else None)
        st.session_state[UNIT] = u
    return u


def on_unit_pick() -> None:
    st.session_state[UNIT] = st.session_state["unit_pick"]


def unit_row(run, unit: str) -> pd.Series:
    u = run.units
    return u.loc[u["unit"].astype(str) == str(unit)].iloc[0]


def number_text(value: Any, fmt: str = "{:,.0f}") -> str:
    return "n/a" if value is None or pd.isna(value) else fmt.format(float(value))


def units_csv(run) -> bytes:
    from core.export import table_to_csv_bytes

    return table_to_csv_bytes(run.units)


def safe_name(text_: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in str(text_))[:60] or "well"


# ---- settings form -----------------------------------------------------------------------------
def _default_limit() -> float:
    try:
        from core.run import DEFAULT_ECON_LIMIT_BOPD

        return float(DEFAULT_ECON_LIMIT_BOPD)
    except ImportError:
        return 1.0


DEFAULT_LIMIT = _default_limit()


def settings_from_form(*, mode: str, econ_limit_bopd: float, oil_price: float, gas_price: float,
                       opex_per_month: float, nri: float, wi: float, severance_tax: float, b_max: float,
                       terminal_decline_pct: float, horizon_years: float, as_of: str, units: str) -> dict[str, Any]:
    """RunSettings fields from the Settings page's form (terminal decline given in %/yr)."""
    by_rate = mode == "an oil rate"
    return {
        "econ_limit_bopd": float(econ_limit_bopd) if by_rate else None,
        "oil_price": None if by_rate else float(oil_price),
        "gas_price": None if by_rate or not gas_price else float(gas_price),
        "opex_per_month": None if by_rate else float(opex_per_month),
        "nri": None if by_rate else float(nri),
        "wi": float(wi),
        "severance_tax": float(severance_tax),
        "b_max": float(b_max),
        "terminal_decline": float(terminal_decline_pct) / 100.0,
        "horizon_years": float(horizon_years),
        "as_of": as_of.strip() or None,
        "units": units,
    }


def terminal_decline_pct() -> float:
    """The applied terminal decline in %/yr (effective), for the Settings form."""
    return 100.0 * float(st.session_state[SETTINGS]["terminal_decline"])


def settings_summary() -> str:
    """One line on the settings in force, for the sidebar."""
    s = st.session_state[SETTINGS]
    limit = s.get("econ_limit_bopd")
    how = f"{limit:g} bbl/d" if limit else ("from prices and costs" if s.get("oil_price") else "default")
    samples = prob_settings()[0]
    prob = f"P90/P50/P10 {samples} samples" if samples else "P90/P50/P10 off"
    return (f"Economic limit: {how} · b max {s.get('b_max'):g} · terminal decline {terminal_decline_pct():.1f} %/yr"
            f" · {prob}")


def settings_note() -> str:
    return (
        "What a change re-runs: the input units re-read the file; the economic limit inputs, the "
        "horizon and the terminal decline re-run the forecast on the kept fits (when core.run offers it); the other settings "
        "re-run fits and forecast from the loaded table (the file is not read again). The P90/P50/P10 "
        "are computed again when asked for. Earlier combinations stay cached, so switching back is instant."
    )


ABOUT_TEXT = """
**What it does.** From monthly production per well (oil, gas, water, days on) and sparse
pressure surveys, Depletion Desk fits Arps declines to each well and forecasts it to the
economic limit (EUR, remaining, economic-limit month); tells where each well and reservoir
unit stands in the four stages of solution-gas-drive depletion from its producing GOR and
pressure; flags wells and units for waterflood (pressure maintenance) planning; and exports
the forecast tables.

**Methods and sources.**

* Decline: Arps exponential, hyperbolic and harmonic declines, with a terminal decline
  (modified hyperbolic) in the forecast. J. J. Arps, "Analysis of Decline Curves", Trans.
  AIME 160, 228-247 (1945). Nominal and effective declines as in SPEE Recommended Evaluation
  Practice 6.
* Economic limit from prices and costs: the rate at which net revenue equals operating cost
  (standard formula; see the README).
* Depletion stages of a solution-gas drive (above the bubble point; gas immobile with the
  GOR below Rsi; free gas flowing with the GOR rising; after the GOR peak), as described in
  standard reservoir-engineering texts on solution-gas-drive reservoirs (e.g. B. C. Craft
  and M. F. Hawkins, *Applied Petroleum Reservoir Engineering*). The README's sources
  section lists every method with its reference.
* Fluid typing: W. D. McCain Jr., "Heavy Components Control Reservoir Fluid Behavior",
  JPT (1994), from initial GOR and stock-tank gravity.
* Black-oil properties: Standing (1947), Vasquez and Beggs (1980), Beggs and Robinson (1975);
  gas z-factor by Hall-Yarborough and Dranchuk-Abou-Kassem.
* Material balance for the expected GOR and pressure path: Tarner (1944) and Muskat (1945)
  with Corey relative permeabilities.
* P90 / P50 / P10 (optional, Settings): moving-block bootstrap of each well's decline fit
  (H. R. Künsch, Annals of Statistics 17(3), 1989) with a level error measured by a hindcast
  of the field's last 24 months, after the backward analysis of Cheng, Wang, McVay and Lee,
  SPE-95974-PA (2010). P90 is the low estimate (exceeded with 90 % probability), P10 the
  high one (SPE-PRMS, 2018). Field totals add the wells sample by sample, not percentile by
  percentile.
* Type wells: the wells' rates aligned at first production or peak, P90 / P50 / P10 per
  month (Hyndman and Fan 1996, type 7 percentiles), Arps fit of the P50.

**Colours.** Charts use the Okabe-Ito colour-universal-design set (Okabe and Ito, 2008),
mapped by us: oil black, gas orange, water reddish purple, fit vermillion dashed, forecast
blue dotted, stages sky blue / yellow / orange / reddish purple.

**Data.** Everything runs on this machine; the app listens on 127.0.0.1 and has no login of
its own. Put it behind your organisation's access control before sharing it.
"""


# ---- runs kept in the store and what changed since the last one ---------------------------------
def save_run_to_store(run, author: str = "", note: str = "") -> int | None:
    """Keep the run (with its dataset) in the store in one transaction; returns the run id."""
    store = _store()
    if store is None:
        raise InputError("the store cannot be opened: the run is not kept")
    src = current_source()
    kw: dict[str, Any] = {"dataset_id": src.dataset_id} if src.kind == "stored" else {
        "load": current_load(), "merged_from": st.session_state.get(APPEND)}
    run_id = store.save_run(run, field=store_field(), author=(author or "").strip(), note=(note or "").strip(), **kw)
    st.session_state["dd_saved_runs"] = {**st.session_state.get("dd_saved_runs", {}), run_key(): run_id}
    return run_id


def saved_run_id() -> int | None:
    """The store's id of the current run when this session saved it."""
    return st.session_state.get("dd_saved_runs", {}).get(run_key())


def changes_since_saved(run) -> dict[str, Any] | None:
    """What changed between the field's last stored run (other than this one) and ``run``:
    ``previous`` (id, as-of month, time), ``summary`` (``core.changes.summarise_changes``),
    ``wells`` (changed wells, ``core.changes.compare_runs``) and ``units``
    (``core.changes.compare_units``); None when the store has no earlier run of the field."""
    store = _store()
    if store is None:
        return None
    try:
        from core.changes import compare_runs, compare_units, summarise_changes

        before = saved_run_id()
        prev = store.previous_run(store_field(), before=before) if before else store.latest_run(store_field())
        if prev is None:
            return None
        wells = compare_runs(prev.wells, run.wells)
        units = compare_units(prev.units, run.units) if prev.units is not None and not prev.units.empty else pd.DataFrame()
    except (ValueError, OSError, ImportError) as exc:
        st.session_state[LAST_ERROR] = f"the change report could not be made: {exc}"
        return None
    return {
        "previous": {"id": prev.id, "as_of": month_text(prev.as_of_month),
                     "created": prev.created_at.strftime("%Y-%m-%d %H:%M UTC") if prev.created_at is not None else ""},
        "summary": summarise_changes(wells),
        "wells": wells.loc[wells["any_change"]].reset_index(drop=True),
        "units": units,
    }


# ---- type wells (core.type_wells) --------------------------------------------------------------
TYPE_WELL_ALIGN = {"first_production": "first month with oil", "peak": "peak month (3-month running median)"}
TYPE_WELL_BASIS = {"producing_day": "per producing day", "calendar_day": "per calendar day"}


@st.cache_resource(show_spinner=False)
def _type_well_cache() -> _LRU:
    return _LRU(16)


def type_wells(run, *, by: str, unit: str | None = None, wells: Iterable[str] = (), align: str = "first_production",
               normalize_peak: bool = False, rate_basis: str = "producing_day", min_wells: int = 5) -> dict[str, Any]:
    """Type wells from ``core.type_wells`` on the loaded history up to the run's as-of month.

    ``by="unit"``: one type well per reservoir unit (``type_wells_by_unit``); ``by="selection"``:
    one type well of the chosen wells (``type_well``). Returns name -> ``TypeWell``; raises
    :class:`InputError` with core's message when no type well can be built. Cached per input.
    """
    from core.type_wells import type_well, type_wells_by_unit

    sel = tuple(sorted(map(str, wells)))
    key = json.dumps([load_key(), month_text(run.as_of), by, sel, align, normalize_peak, rate_basis, int(min_wells),
                      float(run.settings.b_max)])
    cache = _type_well_cache()
    hit = cache.get(key)
    if hit is not None:
        return hit
    prod = current_load().production
    if run.as_of is not None:
        prod = prod[prod["month"] <= pd.Timestamp(run.as_of)]
    kw = dict(align=align, normalize="peak_rate" if normalize_peak else None, rate_basis=rate_basis,
              min_wells=int(min_wells), b_max=float(run.settings.b_max))
    if by == "unit":
        out = type_wells_by_unit(prod, **kw)
        if not out:
            raise InputError(f"no reservoir unit has a month with {int(min_wells)} or more producing wells")
    else:
        if not sel:
            raise InputError("pick the wells of the type well")
        out = {"selection": type_well(prod, wells=sel, name="selection", **kw)}
    cache.put(key, out)
    return out


def type_well_fit_text(tw) -> str:
    """The Arps fit of a type well's P50 in one line."""
    f = tw.fit
    if not getattr(f, "model", ""):
        return "not fitted"
    return f"{f.model}, qi {f.qi:,.1f} bbl/d, di {f.di:.3f} 1/yr nominal, b {f.b:.2f}"


def type_well_csv(tws: dict[str, Any]) -> bytes:
    """The type wells' export table as CSV (``core.type_wells.type_well_to_csv``)."""
    from core.type_wells import type_well_to_csv

    return type_well_to_csv(list(tws.values())).encode("utf-8")
