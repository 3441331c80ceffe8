"""Security defaults: loopback unless told otherwise, a password for any other address
(HTTP basic auth, RFC 7617), no debug server off the loopback, a capped request size, no
uploaded name used as a path, and SQL only through bound parameters."""

from __future__ import annotations

import ast
import base64
import re
from pathlib import Path

import pytest

from rundash.cli import build_parser, main
from rundash.dashboard import security
from rundash.dashboard.pages.importer import MAX_UPLOAD_BYTES, sanitise_filename
from rundash.errors import ConfigError

PACKAGE = Path(__file__).resolve().parents[2] / "rundash"


def basic(user: str, pw: str) -> str:
    # RFC 7617 section 2: "Basic " + base64(user-id ":" password)
    return "Basic " + base64.b64encode(f"{user}:{pw}".encode()).decode()


class TestBinding:
    def test_serve_binds_loopback_by_default(self):
        args = build_parser().parse_args(["serve"])
        assert args.host == "127.0.0.1"

    @pytest.mark.parametrize("host, loop", [
        ("127.0.0.1", True), ("127.3.2.1", True), ("::1", True), ("[::1]", True),
        ("localhost", True), ("0.0.0.0", False), ("::", False), ("192.168.1.20", False),
        ("example.org", False), ("", False)])
    def test_loopback_addresses(self, host, loop):
        assert security.is_loopback(host) is loop

    @pytest.mark.parametrize("host", ["0.0.0.0", "192.168.1.20", "::"])
    def test_other_address_needs_a_password(self, host):
        with pytest.raises(ConfigError, match=r"Invalid value for '--host'.*RUNDASH_PASSWORD"):
            security.check_serve_options(host, password=None, debug=False)
        security.check_serve_options(host, password="s3cret", debug=False)

    def test_debug_only_on_loopback(self):
        security.check_serve_options("127.0.0.1", password=None, debug=True)
        with pytest.raises(ConfigError, match=r"'--debug'.*loopback"):
            security.check_serve_options("0.0.0.0", password="s3cret", debug=True)

    def test_cli_refuses_exposed_serve_without_password(self, tmp_path, capsys, monkeypatch):
        monkeypatch.delenv("RUNDASH_PASSWORD", raising=False)
        rc = main(["serve", "--host", "0.0.0.0", "--db", str(tmp_path / "x.sqlite")])
        err = capsys.readouterr().err.strip()
        assert rc == 1 and len(err.splitlines()) == 1 and "password" in err
        assert not (tmp_path / "x.sqlite").exists()  # refused before opening anything
        rc = main(["serve", "--host", "0.0.0.0", "--debug", "--password-file",
                   str(tmp_path / "none.txt"), "--db", str(tmp_path / "x.sqlite")])
        assert rc == 1 and "password file" in capsys.readouterr().err

    def test_password_from_file_or_environment(self, tmp_path):
        f = tmp_path / "pw.txt"
        f.write_text("correct horse\nignored\n", encoding="utf-8")
        assert security.resolve_password(str(f), env={}) == "correct horse"
        assert security.resolve_password(None, env={"RUNDASH_PASSWORD": "x1"}) == "x1"
        assert security.resolve_password(None, env={"RUNDASH_PASSWORD": ""}) is None
        f.write_text("", encoding="utf-8")
        with pytest.raises(ConfigError, match="pw.txt: the password file is empty"):
            security.resolve_password(str(f), env={})

    def test_instructions_say_how_to_expose_it(self):
        text = " ".join(security.instructions("127.0.0.1", 8050, password=None))
        assert "http://127.0.0.1:8050/" in text and "--host" in text
        assert "RUNDASH_PASSWORD" in text and "--password-file" in text
        text = " ".join(security.instructions("0.0.0.0", 8050, password="p"))
        assert "basic" in text and "'rundash'" in text and "TLS" in text


class TestBasicAuth:
    def test_header_check(self):
        assert security.authorised(basic("rundash", "pw:with:colons"), "pw:with:colons")
        for bad in (None, "", "Bearer x", basic("rundash", "wrong"), basic("admin", "pw"),
                    "Basic !!notbase64", "Basic " + base64.b64encode(b"nocolon").decode()):
            assert not security.authorised(bad, "pw")

    @pytest.fixture
    def app(self, demo_db):
        from rundash.dashboard.app import create_app
        return create_app(demo_db.db, password="s3cret")

    def test_every_request_needs_the_password(self, app):
        client = app.server.test_client()
        for path in ("/", "/_dash-layout", "/_dash-dependencies", "/run/1"):
            r = client.get(path)
            assert r.status_code == 401 and r.headers["WWW-Authenticate"].startswith("Basic")
            assert client.get(path, headers={"Authorization": basic("rundash", "nope")}
                              ).status_code == 401
        ok = client.get("/", headers={"Authorization": basic("rundash", "s3cret")})
        assert ok.status_code == 200
        r = client.post("/_dash-update-component", json={})
        assert r.status_code == 401

    def test_request_size_is_capped(self, demo_db):
        from rundash.dashboard.app import create_app
        app = create_app(demo_db.db)
        cap = app.server.config["MAX_CONTENT_LENGTH"]
        assert MAX_UPLOAD_BYTES * 4 // 3 < cap <= MAX_UPLOAD_BYTES * 4 // 3 + (2 << 20)
        client = app.server.test_client()
        r = client.post("/_dash-update-component", data=b"x" * (cap + 1),
                        headers={"Content-Type": "application/json"})
        assert r.status_code == 413
        # without a password the loopback dashboard answers freely
        assert client.get("/").status_code == 200


class TestUploadNames:
    @pytest.mark.parametrize("name", [
        "../../etc/passwd", "..\\..\\boot.ini", "/abs/path/run.wav", "C:\\x\\run.wav",
        "..", ".", "", "a/../../b.csv", "\x00evil.wav", "run\nname.csv", "~/.ssh/id_rsa",
        ".hidden.wav", "x" * 500 + ".wav"])
    def test_sanitised_names_are_plain_base_names(self, name, tmp_path):
        safe = sanitise_filename(name)
        assert re.fullmatch(r"[A-Za-z0-9_-][A-Za-z0-9._-]{0,99}", safe), safe
        assert (tmp_path / safe).resolve().parent == tmp_path.resolve()


SQL_WORDS = re.compile(r"\b(SELECT|INSERT|UPDATE|DELETE|PRAGMA|CREATE|DROP|ALTER|WHERE)\b")
ALLOWED = {("storage/engine.py", "PRAGMA busy_timeout")}  # an integer constant, not input


class TestBoundParameters:
    def test_no_sql_is_built_from_strings(self):
        """No f-string, %-format or .format() call in rundash/ builds SQL text; the one
        allowed place is the busy-timeout pragma in storage/engine.py (a constant)."""
        found = []
        for path in sorted(PACKAGE.rglob("*.py")):
            rel = path.relative_to(PACKAGE).as_posix()
            tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
            for node in ast.walk(tree):
                text = None
                if isinstance(node, ast.JoinedStr):
                    text = "".join(v.value for v in node.values
                                   if isinstance(v, ast.Constant) and isinstance(v.value, str))
                elif (isinstance(node, ast.BinOp) and isinstance(node.op, ast.Mod)
                      and isinstance(node.left, ast.Constant)
                      and isinstance(node.left.value, str)):
                    text = node.left.value
                elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
                      and node.func.attr == "format" and isinstance(node.func.value, ast.Constant)
                      and isinstance(node.func.value.value, str)):
                    text = node.func.value.value
                if text is None or not SQL_WORDS.search(text):
                    continue
                # SQL keywords in capitals followed by SQL shape, not prose
                if not re.search(r"\b(SELECT\b.*\bFROM|INSERT\s+INTO|UPDATE\b.*\bSET|DELETE\s+"
                                 r"FROM|PRAGMA\s+\w|CREATE\s+TABLE|DROP\s+TABLE|ALTER\s+TABLE)",
                                 text):
                    continue
                if any(rel == f and s in text for f, s in ALLOWED):
                    continue
                found.append(f"{rel}:{node.lineno}: {text[:60]!r}")
        assert not found, "SQL built from strings:\n" + "\n".join(found)

    def test_the_check_catches_an_f_string_query(self, tmp_path):
        code = 'run_id = 1\nq = f"SELECT * FROM run WHERE id = {run_id}"\n'
        node = next(n for n in ast.walk(ast.parse(code)) if isinstance(n, ast.JoinedStr))
        text = "".join(v.value for v in node.values if isinstance(v, ast.Constant))
        assert re.search(r"SELECT\b.*\bFROM", text)


class TestPasswordText:
    """What counts as the password (issue: a BOM made login impossible; one space was
    accepted)."""

    def test_byte_order_mark_and_line_ending_are_not_part_of_it(self, tmp_path):
        f = tmp_path / "pw.txt"
        f.write_bytes("\ufeffcorrect horse\r\n".encode("utf-8"))
        pw = security.resolve_password(str(f), env={})
        assert pw == "correct horse"
        assert security.authorised(basic("rundash", "correct horse"), pw)

    @pytest.mark.parametrize("content", [" ", "  \t ", "\ufeff \n"])
    def test_blank_password_file_is_refused(self, tmp_path, content):
        f = tmp_path / "pw.txt"
        f.write_bytes(content.encode("utf-8"))
        with pytest.raises(ConfigError, match=r"^pw\.txt: the password on the first line is "
                                              r"only blanks; expected a real password$"):
            security.resolve_password(str(f), env={})

    def test_blank_password_in_the_environment_is_refused(self):
        with pytest.raises(ConfigError, match="RUNDASH_PASSWORD holds only blanks"):
            security.resolve_password(None, env={"RUNDASH_PASSWORD": " "})

    def test_cli_refuses_a_blank_password_in_one_line(self, tmp_path, capsys, monkeypatch):
        monkeypatch.setenv("RUNDASH_PASSWORD", " ")
        rc = main(["serve", "--host", "0.0.0.0", "--db", str(tmp_path / "x.sqlite")])
        err = capsys.readouterr().err.strip().splitlines()
        assert rc == 1 and len(err) == 1 and "only blanks" in err[0]
