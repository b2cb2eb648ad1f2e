"""The review page's HTTP server: 127.0.0.1 only, a random token, a fixed set of routes.

Routes (every one needs ``?t=TOKEN`` or the header ``X-View-Token``)::

    GET  /                      the page (index.html with the token filled in)
    GET  /view.js, /view.css    the page's script and style
    GET  /api/info              what is being viewed
    GET  /api/image?k=N         image N as a PNG
    GET  /api/map?k=N&component=xx&measure=...&window=9&limits=shared|frame|manual[&lo=&hi=]
                                &under=ref|cur
    GET  /api/point?x=&y=&component=&measure=&window=
    GET  /api/reference?k=&x=&y=  (reference position of a point of frame k's image)
    GET  /api/quality
    POST /api/gauge, /api/export, /api/follow        (results page)
    POST /api/check, /api/advise, /api/save          (set-up page)

Requests name frames and quantities, never files: no part of an address reaches the file
system, so only the images and the results of the analysis being viewed can be read.
"""

from __future__ import annotations

import json
import logging
import secrets
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib import resources
from pathlib import Path
from urllib.parse import parse_qs, unquote, urlsplit

from dic.errors import InputError
from dic.strain.defaults import DEFAULT_WINDOW

__all__ = ["ViewServer", "start_server", "source_for", "CSP", "HOST"]

log = logging.getLogger("dic.view")

#: the only address the server listens on
HOST = "127.0.0.1"
#: nothing may be loaded from anywhere but this server (images of the page are data: URLs)
CSP = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data: blob:; "
       "connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'")
_STATIC = {"/view.js": ("view.js", "text/javascript; charset=utf-8"),
           "/view.css": ("view.css", "text/css; charset=utf-8")}
_MAX_BODY = 1 << 20


def source_for(path, out=None):
    """A results file or output folder -> :class:`ResultsData`; a folder of images ->
    :class:`SetupData`."""
    from dic.view.results_data import RESULTS_NAME, ResultsData
    from dic.view.setup_data import SetupData

    from dic.images.io import IMAGE_EXTENSIONS

    p = Path(path)
    if p.is_file() and p.suffix.lower() in IMAGE_EXTENSIONS:
        raise InputError(f"PATH: '{p}' is one image; give the folder of images for the set-up "
                         "page, or a results file")
    if p.is_file() or (p.is_dir() and (p / RESULTS_NAME).is_file()):
        return ResultsData(p)
    if not p.exists() and not any(c in str(p) for c in "*?["):
        raise FileNotFoundError(f"PATH: no such file or folder '{p}'; give a results file, an "
                                "output folder of 'dic run' or a folder of images")
    return SetupData(p, out)


class _Refused(Exception):
    def __init__(self, status, message):
        super().__init__(message)
        self.status = status


def _static(name) -> bytes:
    return resources.files("dic.view").joinpath("static", name).read_bytes()


class _Handler(BaseHTTPRequestHandler):
    server_version = "dic-view"
    sys_version = ""

    def log_message(self, fmt, *args):  # quiet: requests go to the debug log only
        log.debug("view: " + fmt, *args)

    # -- checks -------------------------------------------------------------------------------
    def _checked(self):
        view = self.server.view
        raw = self.path
        parts = urlsplit(raw)
        path = unquote(parts.path)
        if ".." in path or "\\" in path or "//" in path or ".." in unquote(raw):
            raise _Refused(400, "paths with '..' are refused")
        host = (self.headers.get("Host") or "").split(":")[0]
        if host not in (HOST, "localhost"):
            raise _Refused(403, "unknown host")
        query = {k: v[-1] for k, v in parse_qs(parts.query).items()}
        token = query.pop("t", None) or self.headers.get("X-View-Token") or ""
        if not secrets.compare_digest(token.encode(), view.token.encode()):
            raise _Refused(403, "missing or wrong token")
        return path, query

    def _send(self, status, body: bytes, ctype):
        self.send_response(status)
        self.send_header("Content-Type", ctype)
        self.send_header("Content-Length", str(len(body)))
        self.send_header("Content-Security-Policy", CSP)
        self.send_header("X-Content-Type-Options", "nosniff")
        self.send_header("Referrer-Policy", "no-referrer")
        self.send_header("Cache-Control", "no-store")
        self.end_headers()
        if self.command != "HEAD":
            self.wfile.write(body)

    def _json(self, status, obj):
        self._send(status, json.dumps(obj, allow_nan=False).encode(),
                   "application/json; charset=utf-8")

    def _body(self):
        n = int(self.headers.get("Content-Length") or 0)
        if n > _MAX_BODY:
            raise _Refused(413, "request too large")
        try:
            data = json.loads(self.rfile.read(n) or b"{}")
        except ValueError:
            raise _Refused(400, "the request is not JSON") from None
        if not isinstance(data, dict):
            raise _Refused(400, "the request is not a JSON object")
        return data

    def _handle(self, method):
        try:
            path, query = self._checked()
            self.server.view.route(self, method, path, query)
        except _Refused as exc:
            self._json(exc.status, {"error": str(exc)})
        except (ValueError, OSError, KeyError, IndexError, TypeError) as exc:
            msg = " ".join(str(exc).split()) or type(exc).__name__
            self._json(400, {"error": msg})

    def do_GET(self):  # noqa: N802 -- the standard library's name
        self._handle("GET")

    def do_POST(self):  # noqa: N802
        self._handle("POST")


def _f(query, key, default=None):
    v = query.get(key)
    if v is None or v == "":
        return default
    try:
        return float(v)
    except ValueError:
        raise _Refused(400, f"{key}: expected a number") from None


class ViewServer:
    """The server of one review or set-up page.

    Parameters
    ----------
    source : ResultsData or SetupData
        What is viewed (see :func:`source_for`).
    port : int
        0 (default) picks a free port.

    Attributes
    ----------
    token : str
        The random token every request must carry.
    url : str
        The page's address, token included.
    """

    def __init__(self, source, port: int = 0):
        self.source = source
        self.token = secrets.token_urlsafe(24)
        self.httpd = ThreadingHTTPServer((HOST, int(port)), _Handler)
        self.httpd.daemon_threads = True
        self.httpd.view = self
        self.port = self.httpd.server_address[1]
        self.url = f"http://{HOST}:{self.port}/?t={self.token}"
        self._thread = None
        self._warm = None
        warm = getattr(source, "warm_up", None)
        if warm is not None:  # the first picture is ready sooner while the browser starts
            self._warm = threading.Thread(target=warm, daemon=True, name="dic-view-warm-up")
            self._warm.start()

    @property
    def mode(self) -> str:
        """``"results"`` or ``"setup"``."""
        return "results" if hasattr(self.source, "frame_map") else "setup"

    def serve_forever(self):
        """Serve until :meth:`stop` is called or the process is interrupted."""
        self.httpd.serve_forever(poll_interval=0.2)

    def start(self):
        """Serve from a background thread; returns self."""
        self._thread = threading.Thread(target=self.serve_forever, daemon=True)
        self._thread.start()
        return self

    def stop(self):
        """Stop serving, free the port and close the results file."""
        if self._thread is not None:
            self.httpd.shutdown()
            self._thread.join(5)
            self._thread = None
        self.httpd.server_close()
        # the warm-up runs compiled code and reads the results file: let it end before the file
        # is closed and the interpreter shuts down (a thread killed inside such code aborts)
        if self._warm is not None:
            self._warm.join(120)
            self._warm = None
        close = getattr(self.source, "close", None)
        if close is not None:
            close()

    # -- routes ---------------------------------------------------------------------------------
    def route(self, h, method, path, q):
        """Answer one checked request (``h`` is the request handler)."""
        s = self.source
        if method == "GET" and path in ("/", "/index.html"):
            page = _static("index.html").decode("utf-8").replace("{{TOKEN}}", self.token)
            return h._send(200, page.encode("utf-8"), "text/html; charset=utf-8")
        if method == "GET" and path in _STATIC:
            name, ctype = _STATIC[path]
            return h._send(200, _static(name), ctype)
        if method == "GET" and path == "/api/info":
            return h._json(200, s.info())
        if method == "GET" and path == "/api/image":
            return h._send(200, s.image_png(int(_f(q, "k", 0))), "image/png")
        results = {"/api/map", "/api/point", "/api/quality", "/api/gauge", "/api/export",
                   "/api/follow", "/api/reference"}
        setup = {"/api/check", "/api/advise", "/api/save"}
        if path in results and self.mode != "results" or path in setup and self.mode != "setup":
            raise _Refused(404, f"{path} belongs to the other page")
        opts = {"component": q.get("component", "xx"),
                "measure": q.get("measure", getattr(s, "measure", "green-lagrange")),
                "window": int(_f(q, "window", getattr(s, "window", DEFAULT_WINDOW)))}
        if method == "GET" and path == "/api/map":
            return h._json(200, s.frame_map(int(_f(q, "k", 0)), mode=q.get("limits", "shared"),
                                            lo=_f(q, "lo"), hi=_f(q, "hi"),
                                            under=q.get("under", "ref"), **opts))
        if method == "GET" and path == "/api/reference":
            return h._json(200, s.reference_point(int(_f(q, "k", 0)), _f(q, "x", 0.0),
                                                  _f(q, "y", 0.0)))
        if method == "GET" and path == "/api/point":
            return h._json(200, s.point(_f(q, "x", 0.0), _f(q, "y", 0.0), **opts))
        if method == "GET" and path == "/api/quality":
            return h._json(200, s.quality())
        if method == "POST":
            b = h._body()
            o = {k: b[k] for k in ("component", "measure") if k in b}
            if "window" in b:
                o["window"] = int(b["window"])
            if path == "/api/gauge":
                return h._json(200, s.gauge(b.get("gauge") or {}, **o))
            if path == "/api/follow":
                return h._json(200, {"points": s.follow(int(b.get("k", 0)),
                                                        b.get("points") or [])})
            if path == "/api/export":
                return h._json(200, s.export(b.get("gauges") or [], **o))
            if path == "/api/check":
                return h._json(200, s.check(b.get("roi") or {}, b.get("subset", 21)))
            if path == "/api/advise":
                return h._json(200, s.advise(b.get("roi") or {}, b.get("target", 200.0),
                                             b.get("scale")))
            if path == "/api/save":
                return h._json(200, s.save(b.get("roi") or {}, b.get("scale_line"),
                                           b.get("length_mm"), b.get("settings"),
                                           bool(b.get("overwrite"))))
        raise _Refused(404, "no such page")


def start_server(path, *, port: int = 0, out=None) -> ViewServer:
    """Open what ``path`` names and serve its page from a background thread.

    Parameters
    ----------
    path : str or os.PathLike
        A results file, an output folder of ``dic run``, or a folder of images (set-up page).
    port : int
        0 picks a free port.
    out : str or os.PathLike, optional
        Set-up page only: where to write the analysis file.

    Returns
    -------
    ViewServer
        Started; call :meth:`ViewServer.stop` when done.
    """
    return ViewServer(source_for(path, out), port).start()
