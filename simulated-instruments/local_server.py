"""A threaded TCP server bound to 127.0.0.1, run in a background thread.

The simulators' SCPI instruments and the bench control channel all serve this way: one
thread per client connection, local only, port 0 meaning any free port.
"""

from __future__ import annotations

import socketserver
import threading
from typing import Any


class _Server(socketserver.ThreadingTCPServer):
    daemon_threads = True
    allow_reuse_address = True


class LocalServer:
    """Serve ``handler`` on 127.0.0.1; ``context`` is reachable as ``self.server.context``
    from the handler."""

    def __init__(self, handler: type[socketserver.BaseRequestHandler], context: Any, port: int = 0,
                 name: str = "local-server") -> None:
        self._server = _Server(("127.0.0.1", port), handler)
        self._server.context = context  # type: ignore[attr-defined]
        # A short poll interval keeps stop() quick (serve_forever checks for shutdown at it).
        self._thread = threading.Thread(target=self._server.serve_forever, args=(0.05,), name=name, daemon=True)

    @property
    def port(self) -> int:
        return self._server.server_address[1]

    @property
    def address(self) -> str:
        return f"127.0.0.1:{self.port}"

    def start(self) -> LocalServer:
        self._thread.start()
        return self

    def stop(self) -> None:
        self._server.shutdown()
        self._server.server_close()
