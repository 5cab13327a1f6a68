"""The local review server: loopback only, one random token per study, stops when idle.

Addresses (``KEY`` names the study, ``TOKEN`` is its access token)::

    GET  /r/KEY/?token=TOKEN                  the page
    GET  /r/KEY/static/NAME?token=TOKEN       the page's own script and style sheet
    GET  /r/KEY/api/study                     study facts, lanes, indices, review counts
    GET  /r/KEY/api/strip                     the night overview (1 point per 30 s)
    GET  /r/KEY/api/window?t0=&t1=&px=        every lane in [t0, t1), min/max per column
    GET  /r/KEY/api/events                    the event table with review states
    GET  /r/KEY/api/measure?id=               baseline and drop for one event
    GET  /r/KEY/api/file?name=                a report or output file of the study folder
    POST /r/KEY/api/edit                      one edit (JSON body), appended to the log
    POST /r/KEY/api/rescore                   recompute the summary from reviewed events
    POST /r/KEY/api/sign                      sign, as ``hsat sign`` does
    POST /r/KEY/api/alive                     the page is in use (resets the idle clock)
    POST /r/KEY/api/close                     stop the server

Every request must carry the study's token, as the ``token`` query parameter or the
``X-Review-Token`` header; anything else gets 403. The server binds 127.0.0.1 only,
checks the ``Host`` header (a page on another site cannot reach it through DNS
rebinding), sends no-store/no-referrer/CSP headers, serves only three static files by
name, and serves study files only through ``safe_study_file``.
"""

from __future__ import annotations

import contextlib
import hmac
import json
import os
import re
import secrets
import sys
import threading
import time
from collections.abc import Callable
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib import resources
from typing import Any
from urllib.parse import parse_qs, urlsplit

from hsat.errors import HsatError
from hsat.review._edits import EditRefused
from hsat.review._session import ReviewSession

LOOPBACK = "127.0.0.1"
STATIC_FILES: dict[str, str] = {
    "app.js": "text/javascript; charset=utf-8",
    "style.css": "text/css; charset=utf-8",
}
MAX_BODY_BYTES = 1_000_000
DEFAULT_IDLE_MINUTES = 30.0
_SECURITY_HEADERS = {
    "Cache-Control": "no-store",
    "Referrer-Policy": "no-referrer",
    "X-Content-Type-Options": "nosniff",
    "X-Frame-Options": "DENY",
    "Cross-Origin-Resource-Policy": "same-origin",
    "Content-Security-Policy": (
        "default-src 'none'; script-src 'self'; style-src 'self'; connect-src 'self'; "
        "img-src 'self' data:; frame-src 'self'; form-action 'none'; base-uri 'none'; "
        "frame-ancestors 'none'"
    ),
}


def study_key(name: str) -> str:
    """A URL-safe key for the study (its folder name, other characters as '-')."""
    key = re.sub(r"[^A-Za-z0-9_.-]+", "-", name).strip("-.") or "study"
    return key[:64]


class ReviewServer(ThreadingHTTPServer):
    """A ``ThreadingHTTPServer`` for one study on 127.0.0.1 and a free port."""

    daemon_threads = True
    allow_reuse_address = False

    def __init__(self, session: ReviewSession, *, idle_minutes: float = DEFAULT_IDLE_MINUTES,
                 token: str | None = None) -> None:
        self.session = session
        self.key = study_key(session.folder.name)
        self.token = token or secrets.token_urlsafe(32)
        self.idle_s = max(1.0, float(idle_minutes) * 60.0)
        self.last_activity = time.monotonic()
        self.stopping = threading.Event()
        # The page's files, read once: requests never reach the file system by name.
        self.page = _static_text("index.html").replace(b"{{TOKEN}}", self.token.encode())
        self.static = {name: _static_text(name) for name in STATIC_FILES}
        super().__init__((LOOPBACK, 0), _Handler)

    @property
    def port(self) -> int:
        return int(self.server_address[1])

    @property
    def url(self) -> str:
        """The page's address, token included: give it to the reviewer's browser only."""
        return f"http://{LOOPBACK}:{self.port}/r/{self.key}/?token={self.token}"

    def touch(self) -> None:
        self.last_activity = time.monotonic()

    def request_stop(self) -> None:
        """Stop serving soon (from any thread, including a request handler)."""
        if not self.stopping.is_set():
            self.stopping.set()
            threading.Thread(target=self.shutdown, daemon=True).start()

    def watch_idle(self) -> threading.Thread:
        """Start a thread that stops the server after ``idle_s`` without a request."""

        def _watch() -> None:
            while not self.stopping.wait(timeout=min(5.0, self.idle_s / 4)):
                if time.monotonic() - self.last_activity > self.idle_s:
                    self.request_stop()

        thread = threading.Thread(target=_watch, name="hsat-review-idle", daemon=True)
        thread.start()
        return thread


def _static_text(name: str) -> bytes:
    return resources.files("hsat.review").joinpath("static").joinpath(name).read_bytes()


class _Handler(BaseHTTPRequestHandler):
    server: ReviewServer  # type: ignore[assignment]
    server_version = "hsat-review"
    sys_version = ""
    protocol_version = "HTTP/1.1"

    def log_message(self, format: str, *args: Any) -> None:  # noqa: A002
        # Request lines carry the token: never print them.
        return

    # --- plumbing -----------------------------------------------------------------
    def _send(self, status: int, body: bytes, content_type: str) -> None:
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(body)))
        for name, value in _SECURITY_HEADERS.items():
            self.send_header(name, value)
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    def _json(self, status: int, payload: Any) -> None:
        body = json.dumps(payload, separators=(",", ":"), allow_nan=False).encode("utf-8")
        self._send(status, body, "application/json; charset=utf-8")

    def _error(self, status: int, message: str) -> None:
        self._json(status, {"error": message})

    def _host_ok(self) -> bool:
        host = (self.headers.get("Host") or "").strip().lower()
        return host in (f"{LOOPBACK}:{self.server.port}", f"localhost:{self.server.port}")

    def _token_ok(self, query: dict[str, list[str]]) -> bool:
        given = self.headers.get("X-Review-Token") or (query.get("token") or [""])[0]
        return bool(given) and hmac.compare_digest(given.encode(), self.server.token.encode())

    def _route(self) -> tuple[str, dict[str, list[str]]] | None:
        """Check host, study key and token; return the path below the study, or None
        after answering with the refusal."""
        if not self._host_ok():
            self._error(HTTPStatus.FORBIDDEN, "refused: unexpected Host header")
            return None
        parts = urlsplit(self.path)
        query = parse_qs(parts.query, keep_blank_values=True)
        prefix = f"/r/{self.server.key}/"
        if not self._token_ok(query):
            self._error(HTTPStatus.FORBIDDEN, "refused: missing or wrong access token")
            return None
        if not parts.path.startswith(prefix):
            self._error(HTTPStatus.NOT_FOUND, "no such study on this server")
            return None
        self.server.touch()
        return parts.path[len(prefix):], query

    def _body(self) -> dict[str, Any] | None:
        try:
            length = int(self.headers.get("Content-Length") or 0)
        except ValueError:
            length = -1
        if length < 0 or length > MAX_BODY_BYTES:
            self._error(HTTPStatus.REQUEST_ENTITY_TOO_LARGE, "request body too large")
            return None
        ctype = (self.headers.get("Content-Type") or "").split(";")[0].strip().lower()
        if length and ctype != "application/json":
            self._error(HTTPStatus.UNSUPPORTED_MEDIA_TYPE, "send JSON")
            return None
        raw = self.rfile.read(length) if length else b"{}"
        try:
            data = json.loads(raw.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError):
            self._error(HTTPStatus.BAD_REQUEST, "the request body is not valid JSON")
            return None
        if not isinstance(data, dict):
            self._error(HTTPStatus.BAD_REQUEST, "the request body must be a JSON object")
            return None
        return data

    def _run(self, work: Callable[[], Any]) -> None:
        """Answer with ``work()`` as JSON, mapping refusals and errors to statuses."""
        try:
            self._json(HTTPStatus.OK, work())
        except EditRefused as exc:
            self._error(HTTPStatus.BAD_REQUEST, exc.problem)
        except HsatError as exc:
            self._error(HTTPStatus.CONFLICT, str(exc))
        except (ValueError, KeyError) as exc:
            self._error(HTTPStatus.BAD_REQUEST, f"bad request ({exc})")
        except Exception as exc:  # a bug: say so without a traceback unless debugging
            if os.environ.get("HSAT_DEBUG"):
                raise
            print(f"hsat review: internal error ({type(exc).__name__}: {exc})", file=sys.stderr)
            self._error(HTTPStatus.INTERNAL_SERVER_ERROR, "internal error; see the terminal")

    # --- methods ------------------------------------------------------------------
    def do_HEAD(self) -> None:  # noqa: N802
        self.do_GET()

    def do_GET(self) -> None:  # noqa: N802
        self._guarded(self._get)

    def do_POST(self) -> None:  # noqa: N802
        self._guarded(self._post)

    def _guarded(self, handler: Callable[[], None]) -> None:
        try:
            handler()
        except (BrokenPipeError, ConnectionResetError):
            return  # the page went away mid-answer
        except Exception as exc:  # a bug: one line, never a traceback in the terminal
            if os.environ.get("HSAT_DEBUG"):
                raise
            print(f"hsat review: internal error ({type(exc).__name__}: {exc})", file=sys.stderr)
            with contextlib.suppress(OSError):
                self._error(HTTPStatus.INTERNAL_SERVER_ERROR, "internal error; see the terminal")

    def _get(self) -> None:
        routed = self._route()
        if routed is None:
            return
        path, query = routed
        session = self.server.session
        if path in ("", "index.html"):
            self._send(HTTPStatus.OK, self.server.page, "text/html; charset=utf-8")
        elif path.startswith("static/"):
            name = path[len("static/"):]
            if name not in STATIC_FILES:  # a fixed list: no path ever reaches the disk
                self._error(HTTPStatus.NOT_FOUND, "no such file")
                return
            self._send(HTTPStatus.OK, self.server.static[name], STATIC_FILES[name])
        elif path == "api/study":
            self._run(session.study_info)
        elif path == "api/strip":
            self._run(session.strip)
        elif path == "api/window":
            self._run(lambda: session.window(_number(query, "t0"), _number(query, "t1"),
                                             int(_number(query, "px", 1000))))
        elif path == "api/events":
            self._run(session.events)
        elif path == "api/measure":
            self._run(lambda: session.measure((query.get("id") or [""])[0]))
        elif path == "api/file":
            self._file((query.get("name") or [""])[0])
        else:
            self._error(HTTPStatus.NOT_FOUND, "no such address")

    def _file(self, name: str) -> None:
        try:
            target = self.server.session.file(name)
        except PermissionError as exc:
            self._error(HTTPStatus.FORBIDDEN, str(exc))
            return
        except FileNotFoundError:
            self._error(HTTPStatus.NOT_FOUND, "no such file in the study folder")
            return
        kind = "application/pdf" if target.suffix == ".pdf" else "text/plain; charset=utf-8"
        self._send(HTTPStatus.OK, target.read_bytes(), kind)

    def _post(self) -> None:
        routed = self._route()
        if routed is None:
            return
        path, _ = routed
        body = self._body()
        if body is None:
            return
        session = self.server.session
        if path == "api/edit":
            self._run(lambda: session.edit(body))
        elif path == "api/rescore":
            self._run(lambda: session.rescore(str(body.get("reviewer") or "")))
        elif path == "api/sign":
            self._run(lambda: session.sign(body))
        elif path == "api/alive":
            self._json(HTTPStatus.OK, {"idle_s": self.server.idle_s})
        elif path == "api/close":
            self._json(HTTPStatus.OK, {"closing": True})
            self.server.request_stop()
        else:
            self._error(HTTPStatus.NOT_FOUND, "no such address")

    def do_PUT(self) -> None:  # noqa: N802
        self._error(HTTPStatus.METHOD_NOT_ALLOWED, "method not allowed")

    do_DELETE = do_PUT  # noqa: N815
    do_PATCH = do_PUT  # noqa: N815


def _number(query: dict[str, list[str]], name: str, default: float | None = None) -> float:
    values = query.get(name)
    if not values:
        if default is None:
            raise EditRefused(None, f"parameter {name!r} is required")
        return default
    try:
        value = float(values[0])
    except ValueError:
        raise EditRefused(None, f"parameter {name!r} must be a number") from None
    if value != value or value in (float("inf"), float("-inf")):
        raise EditRefused(None, f"parameter {name!r} must be finite")
    return value


def start_server(session: ReviewSession, *, idle_minutes: float = DEFAULT_IDLE_MINUTES
                 ) -> tuple[ReviewServer, threading.Thread]:
    """Start serving ``session`` in a background thread; return the server and thread.

    Call ``server.request_stop()`` (or let the idle time run out) to stop it, then
    ``thread.join()``.
    """
    server = ReviewServer(session, idle_minutes=idle_minutes)
    thread = threading.Thread(target=server.serve_forever, kwargs={"poll_interval": 0.2},
                              name="hsat-review", daemon=True)
    thread.start()
    server.watch_idle()
    return server, thread
