"""The bench control channel: JSON lines over a TCP socket on 127.0.0.1 only.

A scenario, a simulated operator or a test sends one JSON object per line and gets one
JSON object back.  Requests (``"op"`` and its fields):

- ``{"op": "objects"}`` -> ``{"ok": true, "objects": [{"name", "kind", "ports", "description"}...]}``
- ``{"op": "devices"}`` -> ``{"ok": true, "devices": [[serial, model], ...]}``
- ``{"op": "connect", "port": 1, "object": "load", "output": null}`` -> ``{"ok": true}``
- ``{"op": "disconnect", "port": 1}``
- ``{"op": "truth", "port": 1, "start_hz": ..., "stop_hz": ..., "points": ...}`` -> the true
  reflection at the port's reference plane: ``{"ok": true, "re": [...], "im": [...]}``
  (grid defaults to the analyzer's current sweep)
- ``{"op": "error_terms", "port": 1, ...grid...}`` -> ``{"ok": true, "terms": {name: {"re", "im"}}}``
- ``{"op": "set", "noise": false}`` -> switch trace noise off or on
- ``{"op": "status"}`` -> sweeps done and summed busy time

Errors come back as ``{"ok": false, "error": "<what was wrong and how to fix it>"}``; the
connection stays open.
"""

from __future__ import annotations

import json
import socket
import socketserver
from typing import Any

import numpy as np

from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.local_server import LocalServer
from lineproof.simulators.scenario import Scenario

_LINE_LIMIT = 1 << 20


class ControlRequestError(Exception):
    """A control request that cannot be served; its text goes back to the client."""


def _complex_payload(values: np.ndarray) -> dict[str, list[float]]:
    return {"re": values.real.tolist(), "im": values.imag.tolist()}


class BenchController:
    """Executes control requests against a scenario's analyzer and objects."""

    def __init__(self, scenario: Scenario, analyzer: SimulatedAnalyzer) -> None:
        self.scenario = scenario
        self.analyzer = analyzer

    def handle(self, request: Any) -> dict[str, Any]:
        if not isinstance(request, dict) or not isinstance(request.get("op"), str):
            raise ControlRequestError('a request is a JSON object with an "op" string')
        handler = getattr(self, f"_op_{request['op']}", None)
        if handler is None:
            ops = sorted(name[4:] for name in dir(self) if name.startswith("_op_"))
            raise ControlRequestError(f"unknown op {request['op']!r}; use one of {', '.join(ops)}")
        return {"ok": True, **handler(request)}

    def _object(self, name: Any, field: str) -> Any:
        if name is None:
            return None
        if not isinstance(name, str) or name not in self.scenario.objects:
            raise ControlRequestError(f"{field}: no object named {name!r} on this bench (ask op=objects)")
        return self.scenario.objects[name]

    def _port(self, request: dict[str, Any]) -> int:
        port = request.get("port", 1)
        if not isinstance(port, int) or not 1 <= port <= self.analyzer.settings.ports:
            raise ControlRequestError(f"port must be 1..{self.analyzer.settings.ports}, got {port!r}")
        return port

    def _grid(self, request: dict[str, Any]) -> np.ndarray:
        if "points" not in request:
            return self.analyzer.frequencies()
        try:
            start, stop, points = float(request["start_hz"]), float(request["stop_hz"]), int(request["points"])
        except (KeyError, TypeError, ValueError) as exc:
            raise ControlRequestError("a grid needs start_hz, stop_hz and points") from exc
        if not (0 < start <= stop and 1 <= points <= 1_000_001):
            raise ControlRequestError("a grid needs 0 < start_hz <= stop_hz and 1 <= points <= 1000001")
        return np.linspace(start, stop, points)

    def _op_objects(self, request: dict[str, Any]) -> dict[str, Any]:
        return {"objects": [
            {"name": o.name, "kind": o.kind, "ports": o.ports, "description": o.description}
            for o in self.scenario.objects.values()
        ]}

    def _op_devices(self, request: dict[str, Any]) -> dict[str, Any]:
        return {"devices": [list(d) for d in self.scenario.devices]}

    def _op_connect(self, request: dict[str, Any]) -> dict[str, Any]:
        thing = self._object(request.get("object"), "object")
        if thing is None:
            raise ControlRequestError("connect needs an object name")
        output = self._object(request.get("output"), "output")
        try:
            self.analyzer.connect(self._port(request), thing, output)
        except ValueError as exc:
            raise ControlRequestError(str(exc)) from exc
        return {}

    def _op_disconnect(self, request: dict[str, Any]) -> dict[str, Any]:
        self.analyzer.disconnect(self._port(request))
        return {}

    def _op_truth(self, request: dict[str, Any]) -> dict[str, Any]:
        return _complex_payload(self.analyzer.true_reflection(self._port(request), self._grid(request)))

    def _op_error_terms(self, request: dict[str, Any]) -> dict[str, Any]:
        terms = self.analyzer.port_terms(self._port(request), self._grid(request))
        return {"terms": {name: _complex_payload(value) for name, value in terms.as_dict().items()}}

    def _op_set(self, request: dict[str, Any]) -> dict[str, Any]:
        if "noise" in request:
            if not isinstance(request["noise"], bool):
                raise ControlRequestError("noise must be true or false")
            self.analyzer.noise_enabled = request["noise"]
        return {}

    def _op_status(self, request: dict[str, Any]) -> dict[str, Any]:
        return {"sweeps": self.analyzer.sweeps_done, "busy_seconds": self.analyzer.busy_seconds}


class _ControlHandler(socketserver.StreamRequestHandler):
    def handle(self) -> None:
        controller: BenchController = self.server.context  # type: ignore[attr-defined]
        while True:
            line = self.rfile.readline(_LINE_LIMIT)
            if not line:
                return
            try:
                reply = controller.handle(json.loads(line))
            except json.JSONDecodeError as exc:
                reply = {"ok": False, "error": f"not JSON ({exc.msg} at column {exc.colno})"}
            except ControlRequestError as exc:
                reply = {"ok": False, "error": str(exc)}
            try:
                self.wfile.write(json.dumps(reply).encode() + b"\n")
            except OSError:
                return


class ControlServer(LocalServer):
    """Serve a controller on 127.0.0.1 in a background thread."""

    def __init__(self, controller: BenchController, port: int = 0) -> None:
        super().__init__(_ControlHandler, controller, port, name="bench-control")


class BenchControlClient:
    """A small client of the control channel (for simulated operators and tests)."""

    def __init__(self, address: str, timeout_s: float = 10.0) -> None:
        host, _, port = address.rpartition(":")
        if host not in ("127.0.0.1", "localhost"):
            raise ValueError("the bench control channel is local only (127.0.0.1)")
        self._socket = socket.create_connection((host, int(port)), timeout=timeout_s)
        self._reader = self._socket.makefile("rb")

    def request(self, op: str, **fields: Any) -> dict[str, Any]:
        self._socket.sendall(json.dumps({"op": op, **fields}).encode() + b"\n")
        line = self._reader.readline(_LINE_LIMIT * 64)
        if not line:
            raise ConnectionError("bench control channel closed")
        reply = json.loads(line)
        if not reply.get("ok"):
            raise ControlRequestError(reply.get("error", "unknown error"))
        return reply

    def connect(self, port: int, name: str, output: str | None = None) -> None:
        self.request("connect", port=port, object=name, output=output)

    def truth(self, port: int = 1, **grid: Any) -> np.ndarray:
        reply = self.request("truth", port=port, **grid)
        return np.array(reply["re"]) + 1j * np.array(reply["im"])

    def close(self) -> None:
        self._reader.close()
        self._socket.close()

    def __enter__(self) -> BenchControlClient:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
