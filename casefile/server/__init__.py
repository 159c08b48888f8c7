"""The local review page (``casefile serve``): readers sign in, read the cases drawn for them, record
their verdicts, and see the second-read summary. Served on a loopback address only.

``create_app(ledger)`` gives the Flask application (casefile.server.app); ``serve(ledger, host, port)``
runs it until interrupted. Reader accounts are in ``casefile.review.accounts``.
"""

from __future__ import annotations

import ipaddress
from collections.abc import Callable

from casefile.errors import UsageError
from casefile.ledger import Ledger
from casefile.server.app import create_app
from casefile.server.sessions import DEFAULT_MINUTES

DEFAULT_HOST = "127.0.0.1"
DEFAULT_PORT = 8765


def check_host(host: str) -> str:
    """``host`` when it is a loopback address (127.0.0.0/8, ::1 or localhost); else a ``UsageError``: the
    page speaks plain HTTP, so passwords must not cross a network."""
    if host == "localhost":
        return host
    try:
        if ipaddress.ip_address(host).is_loopback:
            return host
    except ValueError:
        pass
    raise UsageError(f"--host {host}: not a loopback address; the review page serves plain HTTP and binds to "
                     "127.0.0.1 (or another loopback address) only")


def serve(ledger: Ledger, host: str = DEFAULT_HOST, port: int = DEFAULT_PORT, *,
          session_minutes: float = DEFAULT_MINUTES, ready: Callable[[str], None] | None = None) -> None:
    """Serve the review page until interrupted; ``ready(url)`` is called once the port is bound."""
    from werkzeug.serving import make_server

    check_host(host)
    app = create_app(ledger, session_minutes=session_minutes)
    server = make_server(host, port, app, threaded=True)  # a browser may hold a spare connection open
    if ready is not None:
        ready(f"http://{host if ':' not in host else f'[{host}]'}:{server.server_port}/")
    try:
        server.serve_forever()
    finally:
        server.server_close()


__all__ = ["DEFAULT_HOST", "DEFAULT_PORT", "check_host", "create_app", "serve"]
