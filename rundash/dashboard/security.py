"""Security defaults of the dashboard: where it binds, who may look, how much may be sent.

- It binds 127.0.0.1 unless told otherwise. Binding any other address needs a password
  (``RUNDASH_PASSWORD`` or ``--password-file``): every request must then carry HTTP basic
  authentication, compared in constant time (:func:`hmac.compare_digest`).
- The debug server (reloader, in-browser tracebacks) is refused on any address but the
  loopback.
- Request bodies are capped (an upload arrives base64-encoded inside a callback request,
  so the cap is the upload limit times 4/3 plus room for the form).
- Uploaded file names are never used as paths (see ``pages/importer.sanitise_filename``).

Basic authentication sends the password in clear text with every request: on a network
anyone can read, put the dashboard behind a TLS proxy.
"""

from __future__ import annotations

import base64
import binascii
import hmac
import ipaddress
import os
from pathlib import Path

from rundash.errors import ConfigError

PASSWORD_ENV = "RUNDASH_PASSWORD"
USER = "rundash"
REALM = "rundash"
MAX_PASSWORD_FILE_BYTES = 4096


def is_loopback(host: str) -> bool:
    """True for addresses only this machine can reach (127.0.0.0/8, ::1, 'localhost')."""
    h = host.strip().strip("[]").lower()
    if h == "localhost":
        return True
    try:
        return ipaddress.ip_address(h).is_loopback
    except ValueError:
        return False  # a host name: it may resolve to anything


def resolve_password(password_file: str | None = None, env=None) -> str | None:
    """The dashboard password: the first line of ``password_file``, else ``RUNDASH_PASSWORD``,
    else None. An empty password counts as none.

    The file's UTF-8 byte-order mark (editors on Windows write one) and the line ending
    are not part of the password; a password of only spaces or tabs is refused, from
    the file or the environment, because it is as good as none.
    """
    env = os.environ if env is None else env
    if password_file is not None:
        path = Path(password_file)
        try:
            raw = path.read_bytes()[: MAX_PASSWORD_FILE_BYTES + 1]
        except OSError as exc:
            raise ConfigError(f"{path.name}: cannot read the password file: "
                              f"{exc.strerror}") from None
        if len(raw) > MAX_PASSWORD_FILE_BYTES:
            raise ConfigError(f"{path.name}: the password file is longer than "
                              f"{MAX_PASSWORD_FILE_BYTES} bytes; expected one line")
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            raise ConfigError(f"{path.name}: the password file is not UTF-8 text") from None
        lines = text.splitlines()
        pw = lines[0] if lines else ""
        if not pw:
            raise ConfigError(f"{path.name}: the password file is empty; expected the "
                              "password on its first line")
        if not pw.strip():
            raise ConfigError(f"{path.name}: the password on the first line is only "
                              "blanks; expected a real password")
        return pw
    pw = env.get(PASSWORD_ENV) or None
    if pw is not None and not pw.strip():
        raise ConfigError(f"{PASSWORD_ENV} holds only blanks; expected a real password (or "
                          "unset it to serve on this computer only)")
    return pw


def check_serve_options(host: str, *, password: str | None, debug: bool) -> None:
    """Refuse an exposed dashboard without a password, and debug mode off the loopback."""
    if is_loopback(host):
        return
    if debug:
        raise ConfigError(f"Invalid value for '--debug': allowed only with a loopback "
                          f"--host (127.0.0.1, ::1, localhost), got host {host!r}")
    if not password:
        raise ConfigError(f"Invalid value for '--host': binding {host!r} exposes the dashboard "
                          f"to the network; allowed only with a password: set {PASSWORD_ENV} "
                          "or give --password-file (or keep the default 127.0.0.1)")


def authorised(header: str | None, password: str, user: str = USER) -> bool:
    """Whether an ``Authorization`` header carries basic credentials ``user:password``.

    Both parts are compared with :func:`hmac.compare_digest` (no early exit on the first
    differing byte), so the time taken does not tell how much of a guess was right.
    """
    if not header or not header.startswith("Basic "):
        return False
    try:
        decoded = base64.b64decode(header[6:].strip(), validate=True).decode("utf-8")
    except (binascii.Error, ValueError):
        return False
    got_user, sep, got_pw = decoded.partition(":")
    if not sep:
        return False
    ok_user = hmac.compare_digest(got_user.encode(), user.encode())
    ok_pw = hmac.compare_digest(got_pw.encode(), password.encode())
    return ok_user and ok_pw


def require_basic_auth(server, password: str, user: str = USER) -> None:
    """Make a Flask ``server`` answer 401 to every request without the credentials."""
    from flask import Response, request

    @server.before_request
    def _check():
        if not authorised(request.headers.get("Authorization"), password, user):
            return Response("rundash: authentication required\n", 401,
                            {"WWW-Authenticate": f'Basic realm="{REALM}", charset="UTF-8"'})
        return None


def cap_request_size(server, max_upload_bytes: int) -> int:
    """Cap request bodies at the base64 size of ``max_upload_bytes`` plus 1 MiB of form;
    larger requests get 413 before they are read. Returns the cap in bytes."""
    cap = (max_upload_bytes * 4) // 3 + (1 << 20)
    server.config["MAX_CONTENT_LENGTH"] = cap
    return cap


def secure(app, *, password: str | None, max_upload_bytes: int) -> None:
    """Apply the defaults to a Dash ``app``: the body cap always, basic auth with a password."""
    cap_request_size(app.server, max_upload_bytes)
    if password:
        require_basic_auth(app.server, password)


def instructions(host: str, port: int, *, password: str | None) -> list[str]:
    """What ``rundash serve`` prints when it starts."""
    shown = f"[{host}]" if ":" in host else host
    lines = [f"rundash dashboard on http://{shown}:{port}/ (Ctrl-C stops it)"]
    if password:
        lines.append(f"sign in as user {USER!r} with the password from {PASSWORD_ENV} or the "
                     "password file (HTTP basic authentication: sent in clear text; use a "
                     "TLS proxy on shared networks)")
    if is_loopback(host):
        lines.append("only this computer can reach it; to serve others, bind another address "
                     f"with --host and set a password ({PASSWORD_ENV} or --password-file)")
    return lines
