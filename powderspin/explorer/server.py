"""Serve the explorer with Bokeh's server on the loopback interface.

Bokeh's server gives each browser tab its own session and document (so each
tab has its own :class:`~powderspin.explorer.state.ExplorerState`), serves
BokehJS from the installed package (nothing comes from the internet), and
refuses a websocket whose ``Origin`` is not on its allow-list (Bokeh's
``allow_websocket_origin``): a page of another site cannot drive the
explorer even from the user's own browser.  The allow-list holds only the
address the page is served on (and its loopback aliases).
"""

from __future__ import annotations

import ipaddress
import socket

__all__ = ["is_loopback", "free_port", "make_server", "allowed_origins"]

#: the path of the page on the server
PAGE_PATH = "/explore"


def is_loopback(host: str) -> bool:
    """Whether ``host`` names this computer's loopback interface only.

    Examples
    --------
    >>> is_loopback("127.0.0.1"), is_loopback("localhost"), is_loopback("0.0.0.0")
    (True, True, False)
    """
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def free_port(host: str = "127.0.0.1") -> int:
    """A port that is free on ``host`` now (the system's choice).

    Examples
    --------
    >>> 0 < free_port() < 65536
    True
    """
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    with socket.socket(family, socket.SOCK_STREAM) as s:
        s.bind((host, 0))
        return int(s.getsockname()[1])


def allowed_origins(host: str, port: int, extra=()) -> list[str]:
    """The websocket origins accepted: the served address, its loopback aliases, and any given.

    Examples
    --------
    >>> allowed_origins("127.0.0.1", 5000)
    ['127.0.0.1:5000', 'localhost:5000']
    """
    out = [f"{host}:{port}"]
    if is_loopback(host):
        out += [f"{h}:{port}" for h in ("127.0.0.1", "localhost") if h != host]
    out += [o for o in extra if o not in out]
    return out


def make_server(make_state, title: str = "", host: str = "127.0.0.1", port: int | None = None, extra_origins=()):
    """A Bokeh server with the explorer page at :data:`PAGE_PATH` (not started).

    Parameters
    ----------
    make_state : callable
        Returns a new ExplorerState; called once per browser tab.
    title : str, optional
    host : str, optional
        Interface to bind (default the loopback interface only).
    port : int, optional
        Port (default: a free one).
    extra_origins : sequence of str, optional
        More ``HOST:PORT`` websocket origins to accept.

    Returns
    -------
    bokeh.server.server.Server
    """
    from bokeh.application import Application
    from bokeh.application.handlers.function import FunctionHandler
    from bokeh.server.server import Server

    from .page import build_page

    port = free_port(host) if not port else int(port)
    app = Application(FunctionHandler(lambda doc: build_page(doc, make_state, title)))
    server = Server({PAGE_PATH: app}, address=host, port=port,
                    allow_websocket_origin=allowed_origins(host, port, extra_origins),
                    check_unused_sessions_milliseconds=5000, unused_session_lifetime_milliseconds=30000)
    _send_without_delay(server)
    return server


def _send_without_delay(server) -> None:
    """Turn off Nagle's algorithm on the page's websockets.

    Bokeh sends each update as several small websocket frames; with Nagle's
    algorithm the second waits for the browser's (delayed) acknowledgement of
    the first, which added about 40 ms to every redraw on Linux.  Tornado
    leaves the choice to the handler (``set_nodelay``), and Bokeh does not set
    it, so the websocket route gets a handler that does.  The check of the
    websocket's origin is Bokeh's own and unchanged.
    """
    from bokeh.server.views.ws import WSHandler

    class _PromptWSHandler(WSHandler):
        def open(self):
            self.set_nodelay(True)
            return super().open()

    for rule in getattr(getattr(server._tornado, "wildcard_router", None), "rules", ()):
        if rule.target is WSHandler:
            rule.target = _PromptWSHandler
