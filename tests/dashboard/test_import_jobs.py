"""The dashboard's import jobs end, whatever happens: every failure becomes a visible error
(before this, an exception of a type the job did not expect killed its worker thread and
the status line polled forever), and a crafted form field is a message, not HTTP 500."""

from __future__ import annotations

import base64
import csv
import time

import numpy as np
import pytest

from rundash.dashboard import ids
from rundash.dashboard.pages import importer
from rundash.storage import queries as q
from rundash.storage.engine import open_database
from tests.badinput.make_corpus import machine_text, signals


def _wait(jobs, job_id, limit_s=120.0):
    """Poll like the status line does, until the job says it is done."""
    t0 = time.monotonic()
    while time.monotonic() - t0 < limit_s:
        st = jobs.get(job_id)
        line, _, _, more = importer.status_view(st)
        if not more:
            return st, line
        time.sleep(0.2)
    pytest.fail(f"the job still runs after {limit_s} s: {jobs.get(job_id)}")


@pytest.fixture
def db(tmp_path):
    d = open_database(str(tmp_path / "jobs.sqlite"), create=True)
    yield d
    d.dispose()


def _spaces_csv(path):
    """A CSV written by the standard csv module whose header has a space after each name
    (a KeyError inside the reader killed the job's thread)."""
    cols = signals()
    names = ["time_s", "tach", "x1", "y1", "v1"]
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow([n + " " for n in names])
        for row in np.column_stack([cols[n] for n in names])[:4000]:
            w.writerow([f"{v:.9g}" for v in row])
    return path


class TestJobsAlwaysEnd:
    def test_header_with_spaces_ends_with_a_result_or_a_visible_error(self, db, tmp_path):
        data = _spaces_csv(tmp_path / "spaces.csv").read_bytes()
        jobs = importer.ImportJobs(db)
        job = jobs.start(filename="spaces.csv", data=data, description_text=machine_text(),
                         label="", cycle="", kind="mixed", started_at=None)
        st, line = _wait(jobs, job)
        assert st.done
        if st.error is not None:  # refused: one visible line, nothing stored
            assert line.startswith("Stopped at ") and "\n" not in st.error
            with db.read() as conn:
                assert [r for r in q.list_runs(conn) if r.state != "complete"] == []
        else:
            assert st.run_id is not None and line.startswith("Done in ")

    def test_an_unexpected_exception_type_ends_the_job_with_an_error(self, db, capsys):
        # data that is not bytes makes the job's own file write raise TypeError, a type no
        # reader raises on purpose: the catch-all must turn it into the job's error
        jobs = importer.ImportJobs(db)
        job = jobs.start(filename="x.csv", data=None, description_text=machine_text(),
                         label="", cycle="", kind="mixed", started_at=None)
        st, line = _wait(jobs, job, limit_s=30)
        assert st.done and st.stage == "saving upload"  # where it stopped, said
        assert line.startswith("Stopped at 'saving upload' after ")
        assert st.error.startswith("unexpected TypeError: ")
        assert "server's log" in st.error
        assert "Traceback" in capsys.readouterr().err  # the details for the bug report

    def test_a_processing_failure_names_the_run_left_imported(self, db, tmp_path):
        # no tach pulses at all: imported whole, processing refuses
        from tests.badinput.make_corpus import csv_text
        data = csv_text(signals(tach="flat")).encode()
        jobs = importer.ImportJobs(db)
        st = jobs.run_sync(filename="flat.csv", data=data, description_text=machine_text(),
                           label="", cycle="", kind="mixed", started_at=None)
        assert st.done and st.run_id is not None
        assert st.error.startswith(f"imported as run {st.run_id} but not processed: ")
        assert f"rundash process {st.run_id}" in st.error


def _dash_post(client, callback_output, inputs, state=()):
    body = {"output": callback_output, "outputs": [], "inputs": list(inputs),
            "state": list(state), "changedPropIds": [f"{inputs[0]['id']}.{inputs[0]['property']}"]}
    return client.post("/_dash-update-component", json=body)


class TestCraftedForm:
    @pytest.fixture
    def client(self, demo_db):
        from rundash.dashboard.app import create_app
        app = create_app(demo_db.db)
        c = app.server.test_client()
        deps = c.get("/_dash-dependencies").get_json()
        return c, deps

    def _callback(self, deps, input_id):
        (cb,) = [d for d in deps if any(i["id"] == input_id for i in d["inputs"])
                 and d["inputs"][0]["id"] == input_id]
        outputs = []
        for part in cb["output"].strip(".").split("..."):
            oid, prop = part.rsplit(".", 1)
            outputs.append({"id": oid, "property": prop.split("@")[0]})
        return cb, outputs

    @pytest.mark.parametrize("field, value", [
        ("filename", {"a": 1}), ("filename", ["x.wav", "y.wav"]), ("contents", 12345),
        ("label", ["a"]), ("machine_source", "machine:abc"), ("machine_source", 7),
        ("kind", {"k": "mixed"}), ("started", 3.5), ("local_path", {"p": "/etc"}),
        ("local_path", "/etc/passwd")])
    def test_start_with_a_crafted_field_answers_with_a_message(self, client, field, value,
                                                               demo_db):
        c, deps = client
        cb, outputs = self._callback(deps, ids.START)
        good = base64.b64encode((demo_db.folder / "k410_2025_trip.wav").read_bytes()[:4000])
        form = {"contents": "data:audio/wav;base64," + good.decode(), "filename": "t.wav",
                "machine_source": "machine:1", "machine": None, "label": "", "cycle": "",
                "kind": "mixed", "started": "", "local_path": None, "process": ["process"]}
        form[field] = value
        order = [("contents", ids.UPLOAD_DATA, "contents"), ("filename", ids.UPLOAD_DATA, "filename"),
                 ("machine_source", ids.MACHINE_SOURCE, "value"),
                 ("machine", ids.UPLOAD_MACHINE, "contents"), ("label", ids.LABEL, "value"),
                 ("cycle", ids.CYCLE, "value"), ("kind", ids.KIND, "value"),
                 ("started", ids.STARTED, "value"), ("local_path", ids.LOCAL_PATH, "value"),
                 ("process", ids.PROCESS, "value")]
        body = {"output": cb["output"], "outputs": outputs,
                "inputs": [{"id": ids.START, "property": "n_clicks", "value": 1}],
                "state": [{"id": i, "property": p, "value": form[k]} for k, i, p in order],
                "changedPropIds": [f"{ids.START}.n_clicks"]}
        r = c.post("/_dash-update-component", json=body)
        assert r.status_code == 200, r.get_data(as_text=True)[:500]
        text = r.get_data(as_text=True)
        assert "Not started." in text and "error" in text

    @pytest.mark.parametrize("name, contents", [(["a.wav"], None), ({"x": 1}, "data:,"),
                                                ("a.wav", 17)])
    def test_crafted_upload_name_answers_with_a_message(self, client, name, contents):
        c, deps = client
        cb, outputs = self._callback(deps, ids.UPLOAD_DATA)
        body = {"output": cb["output"], "outputs": outputs[0] if len(outputs) == 1 else outputs,
                "inputs": [{"id": ids.UPLOAD_DATA, "property": "filename", "value": name},
                           {"id": ids.UPLOAD_DATA, "property": "contents", "value": contents}],
                "state": [], "changedPropIds": [f"{ids.UPLOAD_DATA}.filename"]}
        r = c.post("/_dash-update-component", json=body)
        assert r.status_code == 200, r.get_data(as_text=True)[:500]
        assert "did not arrive as a file" in r.get_data(as_text=True)

    def test_poll_with_a_crafted_job_id(self, client):
        c, deps = client
        cb, outputs = self._callback(deps, ids.POLL)
        body = {"output": cb["output"], "outputs": outputs,
                "inputs": [{"id": ids.POLL, "property": "n_intervals", "value": 3}],
                "state": [{"id": ids.JOB, "property": "data", "value": {"not": "an id"}}],
                "changedPropIds": [f"{ids.POLL}.n_intervals"]}
        r = c.post("/_dash-update-component", json=body)
        assert r.status_code == 200, r.get_data(as_text=True)[:500]


class TestWaitingForTheDatabase:
    def test_the_status_line_says_the_job_waits_for_another_writer(self, db, tmp_path):
        import subprocess
        import sys

        from tests.badinput.make_corpus import csv_text
        from tests.storage.test_engine import LOCK_HOLDER

        holder = subprocess.Popen([sys.executable, "-c", LOCK_HOLDER,
                                   db.engine.url.database, "3"],
                                  stdout=subprocess.PIPE, text=True)
        assert holder.stdout.readline().strip() == "locked"
        jobs = importer.ImportJobs(db)
        job = jobs.start(filename="good.csv", data=csv_text(signals()).encode(),
                         description_text=machine_text(), label="", cycle="", kind="mixed",
                         started_at=None, process=False)
        lines = []
        t0 = time.monotonic()
        while time.monotonic() - t0 < 60:
            line, _, _, more = importer.status_view(jobs.get(job))
            lines.append(line)
            if not more:
                break
            time.sleep(0.1)
        holder.wait(10)
        assert any("for another writer to finish with the database" in ln for ln in lines)
        assert lines[-1].startswith("Done in "), lines[-1]


@pytest.mark.skipif(__import__("shutil").which("chromedriver") is None,
                    reason="chromedriver is not installed (see .ci/run)")
def test_a_failing_upload_ends_with_a_visible_error_in_the_browser(dash_duo, db, tmp_path):
    """The real server in headless Chromium: a file whose processing fails (no tach pulses)
    ends the status line with the error, and the page stops polling. On a database of its
    own: the machine it imports must not become the session's demo database's default."""
    from rundash.dashboard.app import create_app
    from tests.badinput.make_corpus import csv_text
    from tests.dashboard.conftest import ARTIFACTS

    data = tmp_path / "flat_tach.csv"
    data.write_text(csv_text(signals(tach="flat")), encoding="utf-8")
    machine = tmp_path / "rig.toml"
    machine.write_text(machine_text(), encoding="utf-8")
    dash_duo.start_server(create_app(db))
    dash_duo.driver.get(dash_duo.server_url + "/import")
    dash_duo.wait_for_element(f"#{ids.UPLOAD_DATA} input[type=file]", timeout=10)
    dash_duo.find_element(f"#{ids.UPLOAD_DATA} input[type=file]").send_keys(str(data))
    dash_duo.wait_for_contains_text(f"#{ids.UPLOAD_DATA_NAME}", "flat_tach.csv", timeout=10)
    dash_duo.find_element(f"#{ids.UPLOAD_MACHINE} input[type=file]").send_keys(str(machine))
    dash_duo.wait_for_contains_text(f"#{ids.UPLOAD_MACHINE_NAME}", "rig.toml", timeout=10)
    el = dash_duo.find_element(f"#{ids.START}")
    dash_duo.driver.execute_script("arguments[0].scrollIntoView({block: 'center'});", el)
    el.click()
    dash_duo.wait_for_contains_text(f"#{ids.RESULT}", "but not processed", timeout=60)
    dash_duo.wait_for_contains_text(f"#{ids.STATUS}", "Stopped at 'tach", timeout=5)
    assert "Too few tach pulses" in dash_duo.find_element(f"#{ids.RESULT}").text
    ARTIFACTS.mkdir(exist_ok=True)
    dash_duo.driver.save_screenshot(str(ARTIFACTS / "import-failed.png"))
    assert dash_duo.driver.execute_script(
        f"return document.getElementById('{ids.POLL}') !== null") is not None
    time.sleep(1.5)  # stopped polling: the status line does not change any more
    first = dash_duo.find_element(f"#{ids.STATUS}").text
    time.sleep(1.0)
    assert dash_duo.find_element(f"#{ids.STATUS}").text == first
    assert [e for e in dash_duo.get_logs() or [] if e.get("level") == "SEVERE"] == []


class TestUploadedProfile:
    """An uploaded description naming `profile = "<path>"` made the server open that path
    (a FIFO hung the upload, /dev/zero ran out of memory, the wording told which paths
    exist). Uploads may name shipped profiles only, and nothing is opened to say so."""

    @pytest.mark.parametrize("profile", ["/dev/zero", "/etc/passwd", "/no/such/file.toml",
                                         "fifo", "../secret.toml", "API617"])
    def test_refused_with_the_same_words_whether_the_path_exists_or_not(self, demo_db,
                                                                       tmp_path, profile):
        import os
        if profile == "fifo":
            profile = str(tmp_path / "hang.toml")
            os.mkfifo(profile)
        text = machine_text().replace('profile = "fixed-margin"', f'profile = "{profile}"')
        url = "data:text/plain;base64," + base64.b64encode(text.encode()).decode()
        data = "data:text/csv;base64," + base64.b64encode(b"time_s,tach\n0,0\n").decode()
        jobs = importer.ImportJobs(demo_db.db)
        t0 = time.monotonic()
        job, err = importer.start_import(jobs, demo_db.db, data_contents=data,
                                         data_name="r.csv", machine_source="upload",
                                         machine_contents=url, label="", cycle="",
                                         kind="mixed", started="")
        assert time.monotonic() - t0 < 5
        assert job is None
        assert err == ("machine description: [machine].profile: an uploaded description may "
                       "name only a profile shipped with rundash (api610, api612, api617, "
                       f"fixed-margin), got {profile!r}; a profile file of your own is used "
                       "from the command line (rundash import --machine FILE)")

    def test_the_job_itself_refuses_it_too(self, db, tmp_path):
        import os
        fifo = tmp_path / "hang.toml"
        os.mkfifo(fifo)
        text = machine_text().replace('profile = "fixed-margin"', f'profile = "{fifo}"')
        from tests.badinput.make_corpus import csv_text
        jobs = importer.ImportJobs(db)
        st = jobs.run_sync(filename="r.csv", data=csv_text(signals()).encode(),
                           description_text=text, label="", cycle="", kind="mixed",
                           started_at=None)
        assert st.done and st.run_id is None and "may name only a profile shipped" in st.error
        with db.read() as conn:
            assert q.list_runs(conn) == []

    def test_a_shipped_profile_is_accepted(self, db):
        from tests.badinput.make_corpus import csv_text
        text = machine_text().replace('profile = "fixed-margin"', 'profile = "api617"')
        st = importer.ImportJobs(db).run_sync(
            filename="r.csv", data=csv_text(signals()).encode(), description_text=text,
            label="", cycle="", kind="mixed", started_at=None, process=False)
        assert st.done and st.error is None and st.run_id is not None


def test_an_uploaded_description_of_nested_arrays_is_a_message(demo_db):
    # a 10 kB machine file of nested arrays ended in RecursionError and HTTP 500
    text = machine_text() + "\n[extra]\nx = " + "[" * 5000 + "]" * 5000 + "\n"
    url = "data:text/plain;base64," + base64.b64encode(text.encode()).decode()
    data = "data:text/csv;base64," + base64.b64encode(b"time_s,tach\n0,0\n").decode()
    job, err = importer.start_import(importer.ImportJobs(demo_db.db), demo_db.db,
                                     data_contents=data, data_name="r.csv",
                                     machine_source="upload", machine_contents=url, label="",
                                     cycle="", kind="mixed", started="")
    assert job is None
    assert err == ("machine description: not a usable TOML file: arrays or tables are nested "
                   "hundreds of levels deep; expected plain keys and tables")


@pytest.mark.parametrize("kind, direction, test_kind", [
    ("shop-test", "mixed", "shop-test"), ("trip-test", "mixed", "trip-test"),
    ("run-up", "run-up", "field")])
def test_the_import_page_marks_a_shop_or_trip_test(db, kind, direction, test_kind):
    # the kind chosen on the import page: a field run's direction, or a marked shop
    # (mechanical running) test or trip test, stored as the run's test kind
    from tests.badinput.make_corpus import csv_text
    assert kind in importer.KINDS and kind in importer.KIND_LABELS
    st = importer.ImportJobs(db).run_sync(
        filename="r.csv", data=csv_text(signals()).encode(), description_text=machine_text(),
        label="", cycle="", kind=kind, started_at=None, process=False)
    assert st.done and st.error is None
    with db.read() as conn:
        run = q.get_run(conn, st.run_id)
    assert (run.kind, run.test_kind) == (direction, test_kind)
