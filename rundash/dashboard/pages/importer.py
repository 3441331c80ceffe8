"""Import a run: upload a data file and a machine description, import it, process it.

A data file comes as an upload (capped at :data:`MAX_UPLOAD_MB`) or, when the dashboard
serves only this computer, by the path of a file already on it (read in place: no copy,
no cap; :func:`local_files_allowed`). The upload is saved under a sanitised name in a
temporary folder, imported with
:func:`rundash.ingest.importer.import_run` and processed with
:func:`rundash.workflows.pipeline.process_run` in a worker thread; a status line polls its progress.
The jobs live in an :class:`ImportJobs` owned by the app (made in ``register_callbacks``),
never in module state.
"""

from __future__ import annotations

import base64
import binascii
import re
import sys
import tempfile
import threading
import time
import traceback
import uuid
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from rundash.dashboard import ids
from rundash.errors import DuplicateRunError, InputError, RundashError, plain_text

PATH = "/import"
TITLE = "Import a run"
MAX_UPLOAD_MB = 64
MAX_UPLOAD_BYTES = MAX_UPLOAD_MB * 1024 * 1024
MAX_DESCRIPTION_BYTES = 256 * 1024
DATA_SUFFIXES = (".wav", ".csv", ".txt", ".h5", ".hdf5", ".parquet", ".pq", ".mf4", ".mdf")
# a field run's direction (processing corrects it), or a marked shop (mechanical running)
# test or trip test: the kind decides which rules of the profile are in scope
KINDS = ("mixed", "run-up", "coast-down", "steady", "shop-test", "trip-test")
KIND_LABELS = {"mixed": "field run (mixed)", "run-up": "field run-up",
               "coast-down": "field coast-down", "steady": "field, steady",
               "shop-test": "shop test (mechanical running test)",
               "trip-test": "overspeed trip test"}


def match(pathname: str):
    return {} if pathname in ("/import", "/import/") else None


# ----------------------------------------------------------------------------- logic
def sanitise_filename(name: str | None, *, default: str = "upload.dat") -> str:
    """A safe base name: no folders, only letters, digits, '.', '-' and '_', <= 100 chars.

    >>> sanitise_filename("../../etc/passwd")
    'passwd'
    >>> sanitise_filename("run 1 (copy).wav")
    'run_1_copy_.wav'
    """
    base = re.split(r"[\\/]", name or "")[-1]
    base = re.sub(r"[^A-Za-z0-9._-]+", "_", base).lstrip(".")
    base = re.sub(r"_+", "_", base)
    if not base or base in (".", ".."):
        return default
    if len(base) > 100:
        stem, dot, suffix = base.rpartition(".")
        base = (stem[:90] + "." + suffix[:9]) if dot else base[:100]
    return base


def decode_upload(contents: str | None, *, what: str, max_bytes: int) -> bytes:
    """Bytes of a ``dcc.Upload`` data URL; :class:`~rundash.errors.InputError` if unusable."""
    from rundash.errors import InputError

    if not contents:
        raise InputError(f"no {what} uploaded")
    head, sep, b64 = contents.partition(",")
    if not sep or ";base64" not in head:
        raise InputError(f"the {what} did not arrive as a base64 data URL")
    if len(b64) * 3 // 4 > max_bytes + 3:
        raise InputError(f"the {what} is larger than the limit of {max_bytes / 2**20:.0f} MB")
    try:
        data = base64.b64decode(b64, validate=True)
    except (binascii.Error, ValueError):
        raise InputError(f"the {what} is not valid base64") from None
    if len(data) > max_bytes:
        raise InputError(f"the {what} is larger than the limit of {max_bytes / 2**20:.0f} MB")
    if not data:
        raise InputError(f"the {what} is empty")
    return data


def parse_started(text: str | None) -> datetime | None:
    """Start time from 'YYYY-MM-DD HH:MM' (UTC) or ISO text; None when left blank."""
    from rundash.errors import InputError

    if not text or not text.strip():
        return None
    try:
        dt = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise InputError(f"Invalid value for 'started': allowed a date and time like "
                         f"2025-06-03 06:15 (UTC), got {text!r}") from None
    return dt.replace(tzinfo=timezone.utc) if dt.tzinfo is None else dt.astimezone(timezone.utc)


def machine_description_text(db, source: str | None, upload: str | None) -> tuple[str, str]:
    """The machine description's text and where it came from.

    ``source`` is ``'upload'`` or ``'machine:<id>'`` (reuse the description stored with
    that machine's newest run).
    """
    from rundash.errors import invalid_value
    from rundash.storage import queries as q

    if source and source.startswith("machine:"):
        try:
            mid = int(source.split(":", 1)[1])
        except ValueError:
            raise InputError(invalid_value("machine description source", source,
                                           "'upload' or 'machine:<id>'")) from None
        with db.read() as conn:
            runs = q.list_runs(conn, mid)
            text = q.run_description_toml(conn, runs[0].id) if runs else ""
        if not text:
            raise InputError("that machine has no stored machine description; upload one")
        return text, f"machine {mid}, description of run {runs[0].id}"
    raw = decode_upload(upload, what="machine description", max_bytes=MAX_DESCRIPTION_BYTES)
    try:
        return raw.decode("utf-8"), "uploaded machine description"
    except UnicodeDecodeError:
        raise InputError("the machine description is not UTF-8 text (a TOML file)") from None


def check_uploaded_profile(desc) -> None:
    """An uploaded machine description may name only a profile shipped with rundash: a
    path in it would make the server open a file of its own choosing (a FIFO that never
    ends, /dev/zero, a probe of which paths exist). Nothing is opened to decide this."""
    from rundash.ingest.profile_file import list_profiles
    from rundash.errors import ConfigError

    name = desc.machine.profile
    shipped = list_profiles()
    if name not in shipped:
        shown = name if len(name) <= 80 else name[:79] + "…"
        raise ConfigError(
            f"machine description: [machine].profile: an uploaded description may name only "
            f"a profile shipped with rundash ({', '.join(shipped)}), got {shown!r}; a profile "
            "file of your own is used from the command line (rundash import --machine FILE)")


def local_files_allowed() -> bool:
    """Whether this request may import a file by its path: the app was made for a server
    bound to the loopback (``create_app(..., local_files=True)``, which ``serve`` sets for
    127.0.0.1 / ::1 / localhost) and the request itself comes from the loopback. A
    dashboard that others can reach never opens a path a browser names."""
    from flask import current_app, has_request_context, request

    from rundash.dashboard.security import is_loopback

    if not has_request_context() or not current_app.config.get("RUNDASH_LOCAL_FILES"):
        return False
    return is_loopback(request.remote_addr or "")


def local_file(text: str | None) -> Path:
    """The data file a path field names: an absolute path (``~`` expanded) of a regular,
    readable file with a data-file ending; :class:`~rundash.errors.InputError` otherwise,
    naming the path. Nothing is read here."""
    import os

    raw = (text or "").strip().strip('"').strip("'")
    if not raw:
        raise InputError("give the path of the data file on this computer")
    path = Path(raw).expanduser()
    if not path.is_absolute():
        raise InputError(f"{raw}: give the full path of the file (it is opened by the "
                         "server, whose working folder may not be yours)")
    if path.suffix.lower() not in DATA_SUFFIXES:
        raise InputError(f"Invalid value for 'data file path': allowed a file ending in "
                         f"{', '.join(DATA_SUFFIXES)}, got {raw!r}")
    if not path.exists():
        raise InputError(f"{path}: no such file on this computer")
    if not path.is_file():
        raise InputError(f"{path}: not a regular file")
    if not os.access(path, os.R_OK):
        raise InputError(f"{path}: the dashboard may not read this file (permissions)")
    return path


@dataclass(frozen=True)
class JobState:
    """What a status line shows: stage, fraction done, outcome."""

    job_id: str
    stage: str = "waiting"
    fraction: float = 0.0
    done: bool = False
    error: str | None = None
    run_id: int | None = None
    messages: tuple[str, ...] = ()
    started: float = field(default_factory=time.monotonic)


class ImportJobs:
    """Import-and-process jobs of one app, each in a worker thread."""

    def __init__(self, db):
        self._db = db
        self._lock = threading.Lock()
        self._jobs: dict[str, JobState] = {}
        self._threads: dict[str, threading.Thread] = {}

    def get(self, job_id: str | None) -> JobState | None:
        """The job's state; a worker thread gone without a result counts as failed."""
        if not isinstance(job_id, str):
            return None
        with self._lock:
            st = self._jobs.get(job_id)
            t = self._threads.get(job_id)
            if st is not None and not st.done and t is not None and not t.is_alive():
                st = self._jobs[job_id] = replace(
                    st, done=True,
                    error=f"the import stopped at '{st.stage}' without a result (see the "
                          "server's log)")
            return st

    def _set(self, job_id: str, **changes) -> None:
        with self._lock:
            self._jobs[job_id] = replace(self._jobs[job_id], **changes)

    def start(self, *, filename: str, data: bytes | None, description_text: str, label: str,
              cycle: str, kind: str, started_at: datetime | None, process: bool = True,
              stored_description: bool = False, path: Path | None = None) -> str:
        """Start one job; returns its id. Errors are reported through :meth:`get`.

        ``stored_description``: the description is one stored with an earlier run (checked
        when that run was imported), not an upload, so it may name a profile file.
        ``path``: import this file on this computer in place (``data`` is then None).
        """
        job_id = uuid.uuid4().hex
        with self._lock:
            self._jobs[job_id] = JobState(job_id=job_id, stage="reading the file" if path
                                          else "saving upload")
        t = threading.Thread(target=self._run, name=f"rundash-import-{job_id[:8]}", daemon=True,
                             kwargs=dict(job_id=job_id, filename=filename, data=data,
                                         description_text=description_text, label=label,
                                         cycle=cycle, kind=kind, started_at=started_at,
                                         process=process, path=path,
                                         stored_description=stored_description))
        with self._lock:
            self._threads[job_id] = t
        t.start()
        return job_id

    def run_sync(self, **kwargs) -> JobState:
        """Run a job in the calling thread (tests, scripts); returns its final state."""
        job_id = uuid.uuid4().hex
        with self._lock:
            self._jobs[job_id] = JobState(job_id=job_id, stage="saving upload")
        self._run(job_id=job_id, **kwargs)
        return self.get(job_id)

    def _run(self, *, job_id, filename, data, description_text, label, cycle, kind,
             started_at, process=True, stored_description=False, path=None) -> None:
        from rundash.storage.engine import hearing_lock_waits

        def progress(fraction: float, stage: str) -> None:
            self._set(job_id, stage=stage, fraction=float(min(max(fraction, 0.0), 1.0)))

        def lock_wait(waited_s: float, limit_s: float) -> None:
            self._set(job_id, stage=f"waiting {waited_s:.0f} s (at most {limit_s:.0f} s) for "
                                    "another writer to finish with the database")

        with hearing_lock_waits(lock_wait):
            self._work(job_id, progress, filename=filename, data=data,
                       description_text=description_text, label=label, cycle=cycle,
                       kind=kind, started_at=started_at, process=process,
                       stored_description=stored_description, local=path)

    def _work(self, job_id, progress, *, filename, data, description_text, label, cycle, kind,
              started_at, process, stored_description, local=None) -> None:
        from rundash.ingest.importer import import_run, split_import_kind
        from rundash.ingest.machine_file import parse_machine_description

        try:
            desc = parse_machine_description(description_text, "machine description")
            kind, test_kind = split_import_kind(kind)
            if not stored_description:
                check_uploaded_profile(desc)
            src = local  # a file on this computer, read in place; else the saved upload
            with tempfile.TemporaryDirectory(prefix="rundash-upload-") as tmp:
                if src is None:
                    src = Path(tmp) / sanitise_filename(filename)
                    src.write_bytes(data)
                res = import_run(self._db, src, desc, description_text=description_text,
                                 label=label or src.stem, cycle=cycle, kind=kind,
                                 test_kind=test_kind, started_at=started_at,
                                 progress=progress)
            msgs = [f"imported as run {res.run_id}: {res.n_channels} channels, "
                    f"{res.n_samples / res.sample_rate_hz:.1f} s at {res.sample_rate_hz:g} Hz",
                    *res.warnings]
            self._set(job_id, run_id=res.run_id, messages=tuple(msgs))
            if process:
                from rundash.workflows.pipeline import process_run

                pr = process_run(self._db, res.run_id, progress=progress)
                msgs.append(f"processed: {pr.run_kind}, {pr.n_revs} revolutions")
                msgs += list(pr.warnings)
            self._set(job_id, done=True, stage="done", fraction=1.0, messages=tuple(msgs))
        except DuplicateRunError as exc:
            self._set(job_id, done=True, stage="refused", error=f"{exc}")
        except RundashError as exc:
            self._set(job_id, done=True, error=self._where(job_id, str(exc)))
        except (OSError, ValueError) as exc:  # a file the readers could not make sense of
            self._set(job_id, done=True,
                      error=self._where(job_id, f"{type(exc).__name__}: {exc}"))
        except Exception as exc:  # noqa: BLE001 - the job's last word: never a silent death
            # Whatever went wrong, the job ends with a visible error (else the status line
            # polls forever); the traceback goes to the server's log for the bug report.
            traceback.print_exc(file=sys.stderr)
            self._set(job_id, done=True, error=self._where(
                job_id, f"unexpected {type(exc).__name__}: {plain_text(str(exc))[:300]} "
                        "(a fault in rundash, not in your file alone: the details are in the "
                        "server's log)"))

    def _where(self, job_id: str, error: str) -> str:
        """The error, saying which run stays imported when processing failed."""
        st = self.get(job_id)
        if st is not None and st.run_id is not None:
            return (f"imported as run {st.run_id} but not processed: {error}; fix the cause "
                    f"and run 'rundash process {st.run_id}'")
        return error


def status_view(state: JobState | None):
    """(status line, progress bar width, result block, keep polling?) for a job."""
    from dash import dcc, html

    if state is None:
        return "", "0%", "", False
    pct = f"{100 * state.fraction:.0f}%"
    elapsed = time.monotonic() - state.started
    if state.error:
        return (f"Stopped at '{state.stage}' after {elapsed:.1f} s.", pct,
                html.Div(state.error, className="error"), False)
    if state.done:
        link = dcc.Link(f"Review run {state.run_id}", href=f"/run/{state.run_id}")
        return (f"Done in {elapsed:.1f} s.", "100%",
                html.Div([html.Div(link), html.Ul([html.Li(m) for m in state.messages])],
                         className="ok"), False)
    return f"{state.stage}: {pct} ({elapsed:.1f} s)", pct, "", True


def form_text(value: Any, what: str, *, max_chars: int | None = 10_000) -> str | None:
    """A form field as text (None when empty); a field that arrives as anything else (a
    crafted request) or longer than ``max_chars`` is an :class:`InputError`."""
    if value is None:
        return None
    if not isinstance(value, str):
        raise InputError(f"the form field {what!r} did not arrive as text")
    if max_chars is not None and len(value) > max_chars:
        raise InputError(f"the form field {what!r} is longer than {max_chars} characters")
    return value


def start_import(jobs: ImportJobs, db, *, data_contents, data_name, machine_source,
                 machine_contents, label, cycle, kind, started, local_path=None,
                 local_allowed: bool = False, process=True) -> tuple[str | None, str | None]:
    """Check the form and start a job: (job id, None) or (None, error message).

    A non-empty ``local_path`` imports that file on this computer instead of the upload,
    only when ``local_allowed`` (:func:`local_files_allowed`)."""
    try:
        local_path = form_text(local_path, "data file path", max_chars=4096)
        local = None
        if local_path and local_path.strip():
            if not local_allowed:
                raise InputError("a file is imported by its path only when the dashboard "
                                 "serves this computer alone (rundash serve on 127.0.0.1) "
                                 "and the browser runs on it; upload the file instead")
            local = local_file(local_path)
            data_name, data_contents = local.name, None
        data_contents = form_text(data_contents, "data file", max_chars=None)
        data_name = form_text(data_name, "data file name", max_chars=1000)
        machine_source = form_text(machine_source, "machine description source", max_chars=100)
        machine_contents = form_text(machine_contents, "machine description", max_chars=None)
        label = form_text(label, "label", max_chars=500)
        cycle = form_text(cycle, "overhaul cycle", max_chars=500)
        kind = form_text(kind, "kind", max_chars=100)
        started = form_text(started, "started", max_chars=100)
        if not data_name:
            raise InputError("choose a data file first")
        safe = sanitise_filename(data_name)
        if Path(safe).suffix.lower() not in DATA_SUFFIXES:
            raise InputError(f"Invalid value for 'data file': allowed {', '.join(DATA_SUFFIXES)}"
                             f", got {data_name!r}")
        data = None if local is not None else decode_upload(
            data_contents, what="data file", max_bytes=MAX_UPLOAD_BYTES)
        text, _ = machine_description_text(db, machine_source, machine_contents)
        stored = bool(machine_source and machine_source.startswith("machine:"))
        from rundash.ingest.machine_file import parse_machine_description
        desc = parse_machine_description(text, "machine description")  # fail now, not in the job
        if not stored:
            check_uploaded_profile(desc)
        if kind not in KINDS:
            raise InputError(f"Invalid value for 'kind': allowed {', '.join(KINDS)}, got {kind!r}")
        started_at = parse_started(started)
    except RundashError as exc:
        return None, str(exc)
    job = jobs.start(filename=safe, data=data, description_text=text, label=label or "",
                     cycle=cycle or "", kind=kind, started_at=started_at,
                     stored_description=stored, path=local, process=process is not False)
    return job, None


# ----------------------------------------------------------------------------- layout
def layout(db):
    from dash import dcc, html

    from rundash.storage import queries as q

    with db.read() as conn:
        machines = q.list_machines(conn)
    sources = [{"label": "the machine description I upload", "value": "upload"}] + [
        {"label": f"as stored for {m.spec.name}", "value": f"machine:{m.id}"}
        for m in machines if m.n_runs]

    def drop(id_, text, accept, max_size):
        return dcc.Upload(id=id_, className="drop", accept=accept, max_size=max_size,
                          multiple=False, children=html.Div(text),
                          style_reject={"borderColor": "#D55E00", "background": "#fdecea"})

    field_style = {"width": "260px"}
    if local_files_allowed():
        local = [
            html.P("Or a file already on this computer, read where it lies (no copy, no size "
                   "limit; this dashboard serves this computer only): its full path.",
                   className="note", style={"marginTop": "10px"}),
            dcc.Input(id=ids.LOCAL_PATH, type="text", debounce=False,
                      style={"width": "100%", "maxWidth": "720px"},
                      placeholder="/data/k101/startup-2026-05-01.wav")]
    else:
        local = [html.P("Importing a file by its path is offered only when the dashboard "
                        "serves this computer alone (rundash serve on 127.0.0.1) and is "
                        "opened on it.", className="note"),
                 dcc.Input(id=ids.LOCAL_PATH, type="text", disabled=True,
                           style={"display": "none"})]
    return html.Div([
        html.H1(TITLE, style={"fontSize": "22px"}),
        html.Div(className="card", children=[
            html.H3("1 · Data file"),
            html.P(f"A recorder file: WAV, CSV, HDF5, Parquet or MDF. An upload is capped at "
                   f"{MAX_UPLOAD_MB} MB (also from other computers); larger files: give the "
                   "path below on this computer, or use the command line (rundash import).",
                   className="note"),
            drop(ids.UPLOAD_DATA, "Drop the data file here, or click to choose it",
                 ",".join(DATA_SUFFIXES), MAX_UPLOAD_BYTES),
            html.Div(id=ids.UPLOAD_DATA_NAME, className="note"),
            *local,
            html.H3("2 · Machine description", style={"marginTop": "14px"}),
            dcc.RadioItems(id=ids.MACHINE_SOURCE, options=sources,
                           value=sources[1]["value"] if len(sources) > 1 else "upload",
                           inputStyle={"marginRight": "4px"},
                           labelStyle={"display": "block"}),
            drop(ids.UPLOAD_MACHINE, "Drop the machine description (TOML) here, or click",
                 ".toml,.txt", MAX_DESCRIPTION_BYTES),
            html.Div(id=ids.UPLOAD_MACHINE_NAME, className="note"),
            html.H3("3 · About this run", style={"marginTop": "14px"}),
            html.Div(className="controls", children=[
                html.Div([html.Label("Label", className="head"),
                          dcc.Input(id=ids.LABEL, type="text", style=field_style,
                                    placeholder="e.g. first start after overhaul")]),
                html.Div([html.Label("Overhaul cycle", className="head"),
                          dcc.Input(id=ids.CYCLE, type="text", style=field_style,
                                    placeholder="e.g. 2025 overhaul")]),
                html.Div([html.Label("Kind of run (a field run's direction is corrected "
                                     "by processing)", className="head"),
                          dcc.Dropdown(id=ids.KIND, value="mixed", clearable=False,
                                       options=[{"label": KIND_LABELS[k], "value": k}
                                                for k in KINDS],
                                       style={"width": "260px"})]),
                html.Div([html.Label("Started (UTC)", className="head"),
                          dcc.Input(id=ids.STARTED, type="text", style={"width": "180px"},
                                    placeholder="2025-06-03 06:15")]),
                dcc.Checklist(id=ids.PROCESS, value=["process"],
                              options=[{"label": "process after import", "value": "process"}],
                              inputStyle={"marginRight": "4px"}),
                html.Button("Import", id=ids.START, n_clicks=0,
                            style={"padding": "7px 16px", "fontWeight": "600"}),
            ]),
        ]),
        html.Div(className="card", children=[
            html.H3("Status"),
            html.Div(id=ids.STATUS, children="Waiting for a file.", className="muted"),
            html.Div(className="progress", style={"marginTop": "6px"},
                     children=html.Div(id=ids.PROGRESS, style={"width": "0%"})),
            html.Div(id=ids.RESULT, style={"marginTop": "10px"}),
        ]),
        dcc.Store(id=ids.JOB),
        dcc.Interval(id=ids.POLL, interval=400, disabled=True),
    ])


def register_callbacks(app, db) -> None:
    from dash import Input, Output, State, html, no_update

    jobs = ImportJobs(db)

    @app.callback(Output(ids.UPLOAD_DATA_NAME, "children"), Input(ids.UPLOAD_DATA, "filename"),
                  Input(ids.UPLOAD_DATA, "contents"), prevent_initial_call=True)
    def _data_name(name, contents):
        if not name:
            return ""
        if not isinstance(name, str) or not isinstance(contents, (str, type(None))):
            return "That upload did not arrive as a file."
        size = len(contents or "") * 3 / 4 / 2**20
        return f"Chosen: {name} ({size:.1f} MB), saved as {sanitise_filename(name)}"

    @app.callback(Output(ids.UPLOAD_MACHINE_NAME, "children"),
                  Output(ids.MACHINE_SOURCE, "value"),
                  Input(ids.UPLOAD_MACHINE, "filename"), prevent_initial_call=True)
    def _machine_name(name):
        if name and not isinstance(name, str):
            return "That upload did not arrive as a file.", no_update
        return (f"Chosen: {name}", "upload") if name else ("", no_update)

    @app.callback(Output(ids.JOB, "data"), Output(ids.POLL, "disabled"),
                  Output(ids.RESULT, "children"), Output(ids.STATUS, "children"),
                  Input(ids.START, "n_clicks"),
                  State(ids.UPLOAD_DATA, "contents"), State(ids.UPLOAD_DATA, "filename"),
                  State(ids.MACHINE_SOURCE, "value"), State(ids.UPLOAD_MACHINE, "contents"),
                  State(ids.LABEL, "value"), State(ids.CYCLE, "value"), State(ids.KIND, "value"),
                  State(ids.STARTED, "value"), State(ids.LOCAL_PATH, "value"),
                  State(ids.PROCESS, "value"), prevent_initial_call=True)
    def _start(n, data, name, source, machine, label, cycle, kind, started, local_path,
               process):
        job, error = start_import(jobs, db, data_contents=data, data_name=name,
                                  machine_source=source, machine_contents=machine, label=label,
                                  cycle=cycle, kind=kind, started=started,
                                  local_path=local_path, local_allowed=local_files_allowed(),
                                  process=isinstance(process, list) and "process" in process)
        if error:
            return None, True, html.Div(error, className="error"), "Not started."
        return job, False, "", "Starting…"

    @app.callback(Output(ids.STATUS, "children", allow_duplicate=True),
                  Output(ids.PROGRESS, "style"), Output(ids.RESULT, "children",
                                                        allow_duplicate=True),
                  Output(ids.POLL, "disabled", allow_duplicate=True),
                  Input(ids.POLL, "n_intervals"), State(ids.JOB, "data"),
                  prevent_initial_call=True)
    def _poll(_, job_id):
        line, pct, result, more = status_view(jobs.get(job_id))
        return line, {"width": pct}, result, not more
