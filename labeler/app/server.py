"""Serve the app in-process: one Bokeh server, one project file, websocket origins limited to the
served host and port. Nothing here reaches the network beyond the socket it listens on."""

from __future__ import annotations

import ipaddress
import socket
import threading
from pathlib import Path
from typing import Callable

from labeler.errors import InputError

LOOPBACK = "127.0.0.1"


def is_loopback(host: str) -> bool:
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def free_port(host: str = LOOPBACK) -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((host, 0))
        return int(s.getsockname()[1])


def make_application(project_path: str | Path, annotator: str | None = None):
    from bokeh.application import Application
    from bokeh.application.handlers.function import FunctionHandler

    from labeler.app.document import build_document

    path = Path(project_path)

    def make(doc):
        build_document(doc, path, annotator)

    return Application(FunctionHandler(make))


class AppServer:
    """A running app server. ``start()`` returns once it listens; ``run()`` blocks (Ctrl-C ends)."""

    def __init__(self, project_path: str | Path, *, host: str = LOOPBACK, port: int = 0,
                 annotator: str | None = None):
        from labeler.project import Project

        self.project_path = Path(project_path)
        from labeler.app.state import file_layout, shared_labels, shared_proposals

        # fail early on a bad file; read once what every page shares (the windows, the map, the
        # labels and the stored proposals: read again only when they change)
        with Project.open(self.project_path, annotator=annotator) as project:
            layout = file_layout(project)
            shared_labels(project, layout)
            shared_proposals(project, layout)
        self.host = host
        self.port = int(port) or free_port(host if host not in ("0.0.0.0", "") else LOOPBACK)
        self.annotator = annotator
        self.server = None
        self._thread: threading.Thread | None = None

    @property
    def url(self) -> str:
        shown = self.host if self.host not in ("0.0.0.0", "") else LOOPBACK
        return f"http://{shown}:{self.port}/"

    def _make_server(self, io_loop=None):
        from bokeh.server.server import Server

        origins = [f"{self.host}:{self.port}"]
        if self.host == LOOPBACK:
            origins.append(f"localhost:{self.port}")
        kw = {"io_loop": io_loop} if io_loop is not None else {}
        try:
            return Server({"/": make_application(self.project_path, self.annotator)},
                          address=self.host, port=self.port, allow_websocket_origin=origins,
                          num_procs=1, check_unused_sessions_milliseconds=5000,
                          unused_session_lifetime_milliseconds=15000, **kw)
        except OSError as exc:
            raise InputError(f"cannot listen on {self.host}:{self.port} ({exc.strerror or exc}); "
                             "pick another --port") from None

    def run(self, on_ready: Callable[[str], None] | None = None) -> None:
        """Serve in this thread until interrupted."""
        self.server = self._make_server()
        self.server.start()
        self.server.io_loop.add_callback(self._spare)
        if on_ready:
            self.server.io_loop.add_callback(on_ready, self.url)
        try:
            self.server.io_loop.start()
        finally:
            self.server.stop()

    def _spare(self) -> None:
        from labeler.app.document import make_spare

        make_spare(self.project_path, self.annotator)    # the first page's panels, built ahead

    def start_in_thread(self) -> "AppServer":
        """Serve from a daemon thread (tests, benchmarks); returns when it listens."""
        ready = threading.Event()
        failure: list[BaseException] = []

        def target():
            import asyncio

            from tornado.ioloop import IOLoop

            asyncio.set_event_loop(asyncio.new_event_loop())
            loop = IOLoop.current()
            try:
                self.server = self._make_server(io_loop=loop)
                self.server.start()
                loop.add_callback(self._spare)
            except BaseException as exc:
                failure.append(exc)
                ready.set()
                return
            ready.set()
            loop.start()

        self._thread = threading.Thread(target=target, name="labeler-app-server", daemon=True)
        self._thread.start()
        ready.wait(30)
        if failure:
            raise failure[0]
        return self

    def stop(self) -> None:
        srv = self.server
        if srv is None:
            return
        loop = srv.io_loop

        def _stop():
            from labeler.app.document import drop_spare

            drop_spare(self.project_path, self.annotator)
            srv.stop()
            loop.stop()

        loop.add_callback(_stop)
        if self._thread is not None:
            self._thread.join(10)


def serve(project_path: str | Path, *, host: str = LOOPBACK, port: int = 0,
          annotator: str | None = None, open_browser: bool = False,
          echo: Callable[[str], None] = print) -> None:
    """Serve the app over a project file until Ctrl-C; print the URL when it listens."""
    if not is_loopback(host):
        echo(f"warning: serving on {host}, reachable from other machines; recordings are personal "
             "data — use 127.0.0.1 unless you must")
    app = AppServer(project_path, host=host, port=port, annotator=annotator)

    def ready(url):
        echo(f"labeler app: {url}  (Ctrl-C to stop)")
        if open_browser:
            import webbrowser

            webbrowser.open(url)

    app.run(on_ready=ready)
