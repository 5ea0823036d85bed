"""The composer's web server: one page, a few JSON endpoints, loopback by default.

Built on the standard library's :class:`http.server.ThreadingHTTPServer`: the
page is plain HTML, CSS and JavaScript shipped in ``static/`` (no build step,
nothing fetched from the internet), and the server answers only the routes
below.  It reads no file but its own page, the scene (and its side files, in
the scene's folder) and the stills it wrote; it writes only into the output
folder.

Routes
------
``GET /``                      the page
``GET /static/<name>``         its script and style sheet
``GET /state``                 the controls and their starting values
``POST /preview``              ``{settings, side}`` -> the preview's id, time, curve
``GET /preview/<id>.png``      a preview's image
``GET /probe?id=&x=&y=``       the numbers of one preview pixel
``POST /save``                 ``{settings, overwrite}`` -> the saved scene's path
``POST /still``                ``{settings, overwrite}`` starts the full still
``GET /still``                 its progress; ``GET /output/<name>`` its PNG
"""

import io
import json
import re
import socket
import threading
from http import HTTPStatus
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from importlib import resources
from urllib.parse import parse_qs, urlsplit

from ..errors import OutputExists, SceneError, UsageError
from .controls import CONTROL_KEYS
from .session import Superseded

__all__ = ["make_server", "serve"]

MAX_BODY_BYTES = 64 * 1024
STATIC_FILES = {"index.html": "text/html; charset=utf-8",
                "composer.js": "text/javascript; charset=utf-8",
                "composer.css": "text/css; charset=utf-8"}
REFUSALS = (SceneError, UsageError, OutputExists)


def make_server(session, address="127.0.0.1", port=0):
    """A threading HTTP server for ``session`` bound to ``address:port`` (0: a free port)."""
    handler = type("ComposerHandler", (_Handler,), {"session": session})
    server_class = ThreadingHTTPServer
    if ":" in address:   # an IPv6 address such as ::1
        server_class = type("ComposerServer6", (ThreadingHTTPServer,),
                            {"address_family": socket.AF_INET6})
    server = server_class((address, port), handler)
    server.daemon_threads = True
    return server


def server_url(server):
    """The URL of a bound server (IPv6 addresses in brackets)."""
    host, port = server.server_address[:2]
    return f"http://[{host}]:{port}/" if ":" in host else f"http://{host}:{port}/"


def serve(session, address="127.0.0.1", port=0, announce=print):
    """Serve the composer until Ctrl-C (or SIGTERM); a running still is stopped cleanly.

    ``announce(url)`` is called once the server listens; nothing is opened by itself.
    """
    server = make_server(session, address, port)
    threading.Thread(target=session.warm_up, daemon=True, name="composer-warm-up").start()
    try:
        announce(server_url(server))
        server.serve_forever(poll_interval=0.2)
    finally:
        session.stop()
        server.server_close()


def _error_key(message):
    """The control a one-line message is about (the first control key it names), or None."""
    found = [(message.find(key), key) for key in CONTROL_KEYS if re.search(
        rf"(^|[\s'(]){re.escape(key)}($|[\s'=:)])", message)]
    return min(found)[1] if found else None


class _Handler(BaseHTTPRequestHandler):
    session = None
    server_version = "nullray-composer"

    def log_message(self, format, *args):   # one line per request would drown the URL
        pass

    def do_GET(self):
        route = urlsplit(self.path)
        path, query = route.path, parse_qs(route.query)
        try:
            if path == "/":
                return self._static("index.html")
            if path.startswith("/static/"):
                return self._static(path[len("/static/"):])
            if path == "/state":
                return self._json({"controls": self.session.controls(),
                                   "source": self.session.scene.source,
                                   "output_dir": str(self.session.output_dir)})
            if path.startswith("/preview/") and path.endswith(".png"):
                return self._png(self.session.png(path[len("/preview/"):-len(".png")]))
            if path == "/probe":
                return self._json(self.session.probe(
                    query.get("id", [""])[0], _integer(query, "x"), _integer(query, "y")))
            if path == "/still":
                status = dict(self.session.still)
                return self._json(status)
            if path.startswith("/output/"):
                return self._file(self.session.output_file(path[len("/output/"):]))
            return self._json({"error": "not found"}, HTTPStatus.NOT_FOUND)
        except REFUSALS as exc:
            return self._refusal(exc)

    def do_POST(self):
        try:
            request = self._body()
            settings = request.get("settings", {})
            overwrite = request.get("overwrite") is True
            if self.path == "/preview":
                try:
                    return self._json(self.session.preview(settings, request.get("side", 256)))
                except Superseded:
                    return self._json({"superseded": True}, HTTPStatus.CONFLICT)
            if self.path == "/save":
                path = self.session.save_scene(settings, overwrite)
                return self._json({"path": str(path)})
            if self.path == "/still":
                self.session.start_still(settings, overwrite)
                return self._json({"started": True}, HTTPStatus.ACCEPTED)
            return self._json({"error": "not found"}, HTTPStatus.NOT_FOUND)
        except REFUSALS as exc:
            return self._refusal(exc)

    def _body(self):
        length = int(self.headers.get("Content-Length") or 0)
        if not 0 < length <= MAX_BODY_BYTES:
            raise UsageError(f"a request of {length} bytes is not allowed; at most "
                             f"{MAX_BODY_BYTES}")
        try:
            body = json.loads(self.rfile.read(length))
        except (ValueError, UnicodeDecodeError):
            raise UsageError("the request is not JSON") from None
        if not isinstance(body, dict):
            raise UsageError("the request is not a JSON object")
        return body

    def _refusal(self, exc):
        message = str(exc).replace("\r", "\\r").replace("\n", "\\n")
        return self._json({"error": message, "key": _error_key(message)},
                          HTTPStatus.UNPROCESSABLE_ENTITY)

    def _json(self, payload, status=HTTPStatus.OK):
        self._send(json.dumps(payload, allow_nan=False).encode(),
                   "application/json", status)

    def _png(self, pixels):
        from PIL import Image

        buffer = io.BytesIO()
        Image.fromarray(pixels).save(buffer, format="PNG")
        self._send(buffer.getvalue(), "image/png")

    def _static(self, name):
        if name not in STATIC_FILES:
            return self._json({"error": "not found"}, HTTPStatus.NOT_FOUND)
        data = resources.files(__package__).joinpath("static", name).read_bytes()
        self._send(data, STATIC_FILES[name])

    def _file(self, path):
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise UsageError(f"cannot read {path.name}: {exc.strerror or exc}") from None
        self._send(data, "image/png")

    def _send(self, data, content_type, status=HTTPStatus.OK):
        self.send_response(status)
        self.send_header("Content-Type", content_type)
        self.send_header("Content-Length", str(len(data)))
        self.send_header("Cache-Control", "no-store")
        self.end_headers()
        self.wfile.write(data)


def _integer(query, name):
    try:
        return int(query.get(name, [""])[0])
    except ValueError:
        raise UsageError(f"{name} must be a whole number of pixels") from None
