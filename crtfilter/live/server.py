"""The tuning page's server: the standard library's threading HTTP server on 127.0.0.1.

One user on one machine sends a few requests a second, so the standard
library serves it with no dependency to install. What keeps it local:

- it binds 127.0.0.1 only, on a free port the system picks (or the one asked);
- every request carries a random token (``?token=`` on the page's own files,
  the ``X-Token`` header on the calls), compared in constant time;
- the Host header must name 127.0.0.1 or localhost at this port (a page of
  another site that re-points its name at 127.0.0.1 - DNS rebinding - sends its
  own name), and an Origin header, where there is one, must be this server's;
- anything else gets 403, before any work.

It reads only the image it was started on and the presets; it writes only the
preset file a user saves, inside the working folder, and replaces an existing
file only when the request confirms it.
"""

from __future__ import annotations

import hmac
import json
import os
import secrets
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib import resources
from pathlib import Path
from urllib.parse import parse_qs, urlsplit

from ..errors import CrtfilterError
from ..files import write_atomic
from ..presets import load_preset_file
from .controls import controls, preset_text
from .session import Session, Stale

#: The largest request body read (a request of settings is a few kilobytes).
MAX_BODY = 1 << 20

#: The page's own files: name -> content type.
PAGE_FILES = {"page.html": "text/html; charset=utf-8", "page.js": "text/javascript; charset=utf-8",
              "page.css": "text/css; charset=utf-8"}

#: What the page may load and call: its own files and calls, pictures it builds itself.
CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data: blob:; "
       "connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'")


class Refused(Exception):
    """A request answered with an error status and one line saying why."""

    def __init__(self, status: int, message: str, **extra):
        super().__init__(message)
        self.status, self.extra = status, extra


def page_file(name: str) -> bytes:
    return resources.files("crtfilter.live").joinpath("page", name).read_bytes()


def save_target(folder: Path, name: object, session: Session) -> Path:
    """Where a preset named ``name`` is saved: a ``.toml`` file inside ``folder``, not the
    image, not the starting preset's own file (it would extend itself)."""
    if not isinstance(name, str) or not name.strip():
        raise Refused(400, "give the preset a file name, e.g. my-look.toml")
    name = name.strip()
    if "\x00" in name:
        raise Refused(400, "a file name cannot hold a NUL character")
    path = Path(name)
    if path.suffix == "":
        path = path.with_suffix(".toml")
    if path.suffix != ".toml":
        raise Refused(400, f"{name}: a preset file ends in .toml")
    target = path if path.is_absolute() else folder / path
    resolved_folder = folder.resolve()
    try:
        resolved = target.resolve()
        resolved.relative_to(resolved_folder)
    except (ValueError, OSError, RuntimeError):
        raise Refused(403, f"{name}: presets are saved inside the working folder {folder}") from None
    if resolved == resolved_folder or not resolved.parent.is_dir():
        raise Refused(400, f"{name}: no such folder in the working folder")
    if resolved == session.path.resolve():
        raise Refused(403, f"{name}: that is the image being tuned")
    if session.start.path is not None and resolved == Path(session.start.path).resolve():
        raise Refused(409, f"{name}: that is the starting preset's own file; a preset extending it "
                           "cannot replace it - choose another name")
    return resolved


class TuneServer(ThreadingHTTPServer):
    daemon_threads = True
    allow_reuse_address = False

    def __init__(self, session: Session, *, port: int = 0, folder: Path | None = None,
                 token: str | None = None, log=None):
        super().__init__(("127.0.0.1", port), Handler)
        self.session = session
        self.folder = Path(folder or os.getcwd())
        self.token = token or secrets.token_urlsafe(24)
        self.log = log
        self.saved: list[Path] = []
        self._save_lock = threading.Lock()

    @property
    def port(self) -> int:
        return self.server_address[1]

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}/?token={self.token}"

    def hosts(self) -> set[str]:
        return {f"127.0.0.1:{self.port}", f"localhost:{self.port}"}

    def origins(self) -> set[str]:
        return {f"http://{h}" for h in self.hosts()}


class Handler(BaseHTTPRequestHandler):
    server: TuneServer
    protocol_version = "HTTP/1.1"
    server_version = "crtfilter-tune"
    sys_version = ""

    # ------------------------------------------------------------------ plumbing

    def log_message(self, format, *args):  # noqa: A002 - the standard library's name
        if self.server.log:
            self.server.log(format % args)

    def _send(self, status: int, body: bytes, kind: str, headers: dict | None = None) -> None:
        self.send_response(status)
        self.send_header("Content-Type", kind)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("Cache-Control", "no-store")
        self.send_header("X-Content-Type-Options", "nosniff")
        self.send_header("Referrer-Policy", "no-referrer")
        self.send_header("Content-Security-Policy", CSP)
        for k, v in (headers or {}).items():
            self.send_header(k, v)
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    def _json(self, status: int, data: dict) -> None:
        self._send(status, json.dumps(data).encode(), "application/json")

    def _check(self) -> None:
        """403 unless the request is this page's: its Host, its Origin, its token."""
        s = self.server
        if self.headers.get("Host", "") not in s.hosts():
            raise Refused(403, "refused: the Host header does not name this local server")
        origin = self.headers.get("Origin")
        if origin is not None and origin not in s.origins():
            raise Refused(403, "refused: a request from another origin")
        if self.headers.get("Sec-Fetch-Site") == "cross-site":
            raise Refused(403, "refused: a request from another site")
        given = self.headers.get("X-Token") or parse_qs(urlsplit(self.path).query).get("token", [""])[0]
        if not hmac.compare_digest(given.encode(), s.token.encode()):
            raise Refused(403, "refused: no token or a wrong one (use the address crtfilter tune printed)")

    def _body(self) -> dict:
        try:
            length = int(self.headers.get("Content-Length", "0"))
        except ValueError:
            raise Refused(400, "malformed request: a bad Content-Length") from None
        if length > MAX_BODY:
            raise Refused(413, f"a request body is at most {MAX_BODY} bytes")
        raw = self.rfile.read(length) if length > 0 else b""
        try:
            data = json.loads(raw or b"{}")
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise Refused(400, f"malformed request: not JSON ({exc})") from None
        if not isinstance(data, dict):
            raise Refused(400, "malformed request: the body must be a JSON object")
        return data

    def _handle(self, route) -> None:
        try:
            self._check()
            route()
        except Refused as exc:
            if exc.status == 413:  # the body was not read: this connection cannot go on
                self.close_connection = True
            self._json(exc.status, {"error": str(exc), **exc.extra})
        except Stale:  # not an error: the page asked for something newer since
            self._send(204, b"", "application/json", {"X-Stale": "1"})
        except CrtfilterError as exc:  # a setting the loader refuses, an image that cannot be read
            self._json(400, {"error": str(exc)})
        except (BrokenPipeError, ConnectionResetError):
            pass  # the page went away, or dropped this request for a newer one
        except Exception as exc:  # the page shows it; the server goes on
            self._json(500, {"error": f"internal error: {type(exc).__name__}: {exc}"})

    def do_GET(self):  # noqa: N802 - the standard library's name
        self._handle(self._get)

    def do_HEAD(self):  # noqa: N802
        self._handle(self._get)

    def do_POST(self):  # noqa: N802
        self._handle(self._post)

    def _not_served(self):
        raise Refused(405, f"{self.command} is not served here")

    def _refuse_method(self):
        self._handle(self._not_served)

    do_PUT = do_DELETE = do_PATCH = do_OPTIONS = _refuse_method  # noqa: N815

    # ------------------------------------------------------------------ routes

    def _get(self) -> None:
        path = urlsplit(self.path).path
        name = "page.html" if path in ("/", "/index.html") else path.lstrip("/")
        if name in PAGE_FILES:
            body = page_file(name)
            if name == "page.html":  # its own files are fetched with the token too
                body = body.replace(b"__TOKEN__", self.server.token.encode())
            self._send(200, body, PAGE_FILES[name])
        elif path == "/api/start":
            self._json(200, self._start())
        else:
            raise Refused(404, f"{path}: not found")

    def _start(self) -> dict:
        s = self.server.session
        return {"image": s.path.name, "start": s.start.name, "description": s.start.description,
                "source": [int(s.codes.shape[1]), int(s.codes.shape[0])],
                "groups": controls(s.start), "folder": str(self.server.folder)}

    def _post(self) -> None:
        path = urlsplit(self.path).path
        body = self._body()
        s = self.server.session
        values = body.get("values")
        if values is not None and not isinstance(values, dict):
            raise Refused(400, "malformed request: values must be an object {table: {key: value}}")
        client = body.get("client", "")  # each page has its own count of requests
        if not isinstance(client, str) or len(client) > 64:
            raise Refused(400, "malformed request: client must be text of at most 64 characters")
        if path == "/api/view":
            seq = _int(body, "seq")
            box = [_int(body, k) for k in ("top", "bottom", "left", "right")]
            head, data = s.queue.run(("view", client), seq, lambda: s.view(values, *box))
            head["seq"] = seq
            self._send(200, data, "application/octet-stream", {"X-View": json.dumps(head)})
        elif path == "/api/figures":
            seq = _int(body, "seq")
            figures = s.queue.run(("figures", client), seq, lambda: s.figures(values))
            self._json(200, {"seq": seq, **figures})
        elif path == "/api/check":
            s.preset(values)  # the loader's check alone
            self._json(200, {"ok": True})
        elif path == "/api/save":
            self._json(200, self._save(body, values))
        else:
            raise Refused(404, f"{path}: not found")

    def _save(self, body: dict, values: dict | None) -> dict:
        srv, s = self.server, self.server.session
        target = save_target(srv.folder, body.get("name"), s)
        description = body.get("description") or ""
        if not isinstance(description, str):
            raise Refused(400, "malformed request: the description must be text")
        preset = s.preset(values)
        text = preset_text(s.start, preset, target.parent, description.strip())
        with srv._save_lock:
            exists = os.path.lexists(target)
            if exists and body.get("overwrite") is not True:  # the page asks, then sends overwrite
                return {"saved": False, "exists": True, "path": str(target),
                        "error": f"{target.name} exists: confirm to replace it"}
            try:
                write_atomic(target, text.encode(), replace=exists)
            except CrtfilterError as exc:  # made by someone else meanwhile
                raise Refused(409, str(exc), exists=True, path=str(target)) from None
            except OSError as exc:
                raise Refused(400, f"{target}: cannot write ({exc.strerror or exc})") from None
        loaded = load_preset_file(target)
        if loaded.settings != preset.settings:  # never expected: the file says what the page showed
            raise Refused(500, f"{target}: the saved preset does not load back to the page's settings")
        srv.saved.append(target)
        return {"saved": True, "path": str(target), "text": text, "replaced": exists}


def _int(body: dict, key: str) -> int:
    value = body.get(key)
    if not isinstance(value, int) or isinstance(value, bool):
        raise Refused(400, f"malformed request: {key} must be a whole number (got {value!r})")
    return value
