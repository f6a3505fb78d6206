"""``powderspin explore``: a local page where the spectrum follows the controls."""

from __future__ import annotations

import sys
from pathlib import Path

from .common import CliError

__all__ = ["add_parser", "run"]

INSTALL_HINT = "powderspin explore needs Bokeh: pip install 'powderspin[explore]' (or pip install bokeh)"


def add_parser(sub) -> None:
    """Add the ``explore`` command to the subparsers ``sub``."""
    e = sub.add_parser("explore", help="open a page in the browser where the spectrum follows sliders; fit and save")
    e.add_argument("model", help="model file (TOML)")
    e.add_argument("data", nargs="*", help="measured spectrum per measurement, in order (overrides data = ...)")
    e.add_argument("--port", type=int, default=0, help="port (default: a free one)")
    e.add_argument("--host", default="127.0.0.1",
                   help="interface to serve on (default 127.0.0.1, this computer only; others are a risk)")
    e.add_argument("--allow-origin", action="append", default=[], metavar="HOST:PORT",
                   help="another browser origin allowed to drive the page (repeatable)")
    e.add_argument("--axis", choices=("ppm", "hz", "khz"),
                   help="unit of the data files' axis column when the files do not name it")
    e.add_argument("--no-browser", action="store_true", help="print the address only; do not open a browser")
    e.set_defaults(func=run)


def run(args) -> int:
    from ..explorer.server import PAGE_PATH, is_loopback

    if not 0 <= args.port <= 65535:
        raise CliError(f"--port {args.port}: the allowed range is [0, 65535] (0: a free port)")
    try:
        import bokeh  # noqa: F401
    except ImportError:
        raise CliError(INSTALL_HINT) from None
    from ..explorer.state import ExplorerState, load_inputs

    model_path = Path(args.model)
    model, data, paths, warnings = load_inputs(model_path, args.data, args.axis)

    def make_state():
        return ExplorerState(model, data, paths, model_path=str(model_path.resolve()))

    make_state()  # anything wrong with the model at its own values shows here, before serving
    for w in warnings:
        print(f"warning: {w}", file=sys.stderr)
    if not is_loopback(args.host):
        print(f"warning: --host {args.host} serves the page beyond this computer: anyone who can reach it can see "
              "the model and data and write model files as you; use it only on a network you trust",
              file=sys.stderr)
    from ..explorer.server import make_server

    try:
        server = make_server(make_state, model_path.name, args.host, args.port, args.allow_origin)
    except OSError as e:
        raise CliError(f"cannot serve on {args.host} port {args.port or '(free)'}: {e.strerror or e}; "
                       "choose another --port (or none: a free one is taken) or --host") from None
    shown = f"[{args.host}]" if ":" in args.host else args.host
    url = f"http://{shown}:{server.port}{PAGE_PATH}"
    server.start()
    print(url, flush=True)
    if not args.no_browser:
        import webbrowser

        server.io_loop.add_callback(lambda: webbrowser.open(url))
    interrupted = _stop_on_ctrl_c(server)
    try:
        server.io_loop.start()
    except KeyboardInterrupt:
        interrupted.append(True)
    finally:
        try:
            server.stop()
        except Exception:
            pass
    if interrupted:
        print("powderspin explore: stopped (Ctrl-C)", file=sys.stderr)
        return 130
    return 0


def _stop_on_ctrl_c(server) -> list:
    """Let Ctrl-C stop the event loop between callbacks, not as an exception inside one.

    A KeyboardInterrupt raised inside a page callback (or, as SystemError,
    inside a compiled kernel) could be caught and logged by the web framework
    and leave the server running; a signal handler on the event loop stops the
    loop instead.  Returns a list that becomes non-empty once Ctrl-C was pressed.
    """
    import signal

    pressed: list = []

    def stop():
        pressed.append(True)
        server.io_loop.stop()

    try:
        server.io_loop.asyncio_loop.add_signal_handler(signal.SIGINT, stop)
    except (AttributeError, NotImplementedError, RuntimeError, ValueError):
        pass  # no such loop here: Ctrl-C arrives as KeyboardInterrupt
    return pressed
