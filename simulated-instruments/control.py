"""The bench control channel: JSON lines over a TCP socket on 127.0.0.1 only.

A scenario, a simulated operator or a test sends one JSON object per line and gets one
JSON object back.  Every request has ``"op"``; requests about an analyzer may name it with
``"instrument"`` (default ``"analyzer"``).  A grid, where one is taken, is ``start_hz``,
``stop_hz`` and ``points`` (default: the analyzer's current sweep).

- ``objects`` -> ``{"objects": [{"name", "kind", "ports", "description"}, ...]}``
- ``devices`` -> ``{"devices": [[serial, model], ...]}``
- ``connect {port, object, output, reversed}``: ``output`` is a one-port's name that
  terminates a two-port's output, or ``"port:2"`` to put the output on analyzer port 2;
  ``reversed: true`` turns the two-port around (its port 2 faces ``port``).
- ``disconnect {port}``
- ``truth {port, grid}`` -> ``{"re", "im"}``: the true reflection at the port's reference
  plane (for a two-port joining two ports: with a perfect match at the other plane).
- ``truth_s {object | port, grid}`` -> ``{"s": {"s11": {"re", "im"}, ...}}``: an object's own
  S-parameters, or (``port``) the true network between the analyzer's reference planes
  (``s11`` only on a reflection analyzer).
- ``error_terms {port | direction, grid, at}`` -> ``{"model", "terms": {name: {"re", "im"}}}``:
  ``port`` gives the three one-port terms of the direction that port drives; ``direction``
  (``"forward"``: port 1 drives, ``"reverse"``: port 2 drives) gives all six of the
  twelve-term model (three on a reflection analyzer).  ``at``: ``"now"`` (default) or
  ``"last_sweep"`` (the terms as they were when the last sweep was taken; they drift).
- ``set {noise: bool, temperature_c: float}``: trace noise on or off; hold the bench at a
  temperature from now on (the scenario's profile no longer applies)
- ``advance {seconds}`` -> ``{"bench_seconds", "temperature_c"}``: move the bench clock on
- ``fault {instrument, kind, count, after, match, ...}`` -> ``{"armed": {...}}``: arm a fault
  (kinds and fields in :mod:`.faults`; ``instrument`` is ``analyzer``, ``switch``, ...)
- ``faults {instrument}`` -> ``{"faults": {name: {"armed", "spent", "fired"}}}``: what is armed
  and every firing so far, with the command that triggered it
- ``clear_faults {instrument}``: disarm (and forget) the faults of one or every instrument
- ``switch`` -> ``{"closed": ["1!3", ...], "channels": [{"channel", "analyzer", "port",
  "object", "output", "reversed"}, ...]}``: the switch matrix's state and wiring
- ``status`` -> sweeps done, summed busy time, bench clock and temperature

Errors come back as ``{"ok": false, "error": "<what was wrong and how to fix it>"}``; the
connection stays open, whatever the line held (a field of the wrong JSON type, a number that is
not finite, nesting too deep to read).  Unknown fields are refused, so a misspelt field is
never ignored.
"""

from __future__ import annotations

import json
import math
import socket
import socketserver
from collections.abc import Callable, Iterable
from typing import Any

import numpy as np

from lineproof.simulators.analyzer_sim import SimulatedAnalyzer
from lineproof.simulators.drift import BenchEnvironment
from lineproof.simulators.faults import FaultPlan, FaultSpecError
from lineproof.simulators.local_server import LocalServer
from lineproof.simulators.objects import BenchObject
from lineproof.simulators.scenario import Scenario
from lineproof.simulators.switch_sim import SimulatedSwitch

_LINE_LIMIT = 1 << 20
_GRID_FIELDS = frozenset({"start_hz", "stop_hz", "points"})
_MAX_GRID_POINTS = 1_000_001


class ControlRequestError(Exception):
    """A control request that cannot be served; its text goes back to the client."""


def _complex_payload(values: np.ndarray) -> dict[str, list[float]]:
    return {"re": np.real(values).tolist(), "im": np.imag(values).tolist()}


def _s_payload(s: np.ndarray) -> dict[str, dict[str, list[float]]]:
    if s.ndim == 1:
        return {"s11": _complex_payload(s)}
    return {f"s{i + 1}{j + 1}": _complex_payload(s[:, i, j]) for i in range(2) for j in range(2)}


def _text_field(request: dict[str, Any], field: str, default: str, what: str, known: Iterable[str]) -> str:
    """``request[field]`` when it is a string (a list or an object would otherwise reach a
    dictionary lookup and fail there, unhashable)."""
    value = request.get(field, default)
    if not isinstance(value, str):
        raise ControlRequestError(f"{field} must be a string ({what}), got {json.dumps(value)[:60]}; "
                                  f"use one of {', '.join(known) or 'none'}")
    return value


#: The fields each op accepts besides "op" (and "instrument" for analyzer ops).
_OP_FIELDS: dict[str, frozenset[str]] = {
    "objects": frozenset(),
    "devices": frozenset(),
    "status": frozenset(),
    "connect": frozenset({"port", "object", "output", "reversed"}),
    "disconnect": frozenset({"port"}),
    "truth": frozenset({"port"}) | _GRID_FIELDS,
    "truth_s": frozenset({"port", "object"}) | _GRID_FIELDS,
    "error_terms": frozenset({"port", "direction", "at"}) | _GRID_FIELDS,
    "set": frozenset({"noise", "temperature_c"}),
    "advance": frozenset({"seconds"}),
    # fault: the fields of the fault kind (see faults.py), checked there
    "fault": frozenset({"kind", "count", "after", "match", "seconds", "bytes", "code", "text"}),
    "faults": frozenset(),
    "clear_faults": frozenset(),
    "switch": frozenset(),
}


class BenchController:
    """Executes control requests against a bench's analyzers and objects."""

    def __init__(self, scenario: Scenario, analyzers: dict[str, SimulatedAnalyzer] | SimulatedAnalyzer,
                 faults: dict[str, FaultPlan] | None = None, switch: SimulatedSwitch | None = None,
                 environment: BenchEnvironment | None = None) -> None:
        self.scenario = scenario
        self.switch = switch
        self.analyzers = analyzers if isinstance(analyzers, dict) else {"analyzer": analyzers}
        self.faults = faults or {}
        self.environment = environment or self.analyzer.environment
        self._ops: dict[str, Callable[[dict[str, Any]], dict[str, Any]]] = {
            name: getattr(self, f"_op_{name}") for name in _OP_FIELDS
        }

    @property
    def analyzer(self) -> SimulatedAnalyzer:
        return next(iter(self.analyzers.values()))

    def handle(self, request: Any) -> dict[str, Any]:
        if not isinstance(request, dict) or not isinstance(request.get("op"), str):
            raise ControlRequestError('a request is a JSON object with an "op" string, e.g. {"op": "status"}')
        op = request["op"]
        if op not in self._ops:
            raise ControlRequestError(f"unknown op {op!r}; use one of {', '.join(sorted(self._ops))}")
        unknown = set(request) - {"op", "instrument"} - _OP_FIELDS[op]
        if unknown:
            allowed = ", ".join(sorted(_OP_FIELDS[op] | {"instrument"})) or "none"
            raise ControlRequestError(f"{op}: unknown field {sorted(unknown)[0]!r}; its fields are: {allowed}")
        try:
            return {"ok": True, **self._ops[op](request)}
        except ValueError as exc:  # the model refuses (e.g. a Touchstone object asked off its grid)
            raise ControlRequestError(f"{op}: {exc}") from exc

    # -- request fields -------------------------------------------------------------------

    def _instrument(self, request: dict[str, Any]) -> SimulatedAnalyzer:
        name = _text_field(request, "instrument", "analyzer", "an analyzer's name", self.analyzers)
        if name not in self.analyzers:
            raise ControlRequestError(f"instrument: no analyzer named {name!r} on this bench; "
                                      f"use one of {', '.join(self.analyzers)}")
        return self.analyzers[name]

    def _object(self, name: Any, field: str) -> BenchObject:
        if not isinstance(name, str) or name not in self.scenario.objects:
            raise ControlRequestError(f"{field}: no object named {name!r} on this bench (ask op=objects)")
        return self.scenario.objects[name]

    def _port(self, request: dict[str, Any], analyzer: SimulatedAnalyzer, field: str = "port") -> int:
        port = request.get(field, 1)
        ports = analyzer.settings.ports
        if not isinstance(port, int) or isinstance(port, bool) or not 1 <= port <= ports:
            raise ControlRequestError(f"{field} must be an integer 1..{ports}, got {port!r}")
        return port

    def _grid(self, request: dict[str, Any], analyzer: SimulatedAnalyzer) -> np.ndarray:
        given = _GRID_FIELDS & set(request)
        if not given:
            return analyzer.frequencies()
        if given != _GRID_FIELDS:
            raise ControlRequestError("a grid needs all of start_hz, stop_hz and points")
        start, stop, points = request["start_hz"], request["stop_hz"], request["points"]
        if not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (start, stop)) \
                or not isinstance(points, int) or isinstance(points, bool):
            raise ControlRequestError("start_hz and stop_hz must be numbers, points an integer")
        if not (math.isfinite(start) and math.isfinite(stop)):
            # Python's json reads Infinity, NaN and 1e400 (RFC 8259 §6 has no such numbers)
            raise ControlRequestError(f"start_hz and stop_hz must be finite numbers of hertz, got {start!r} and "
                                      f"{stop!r}; e.g. \"start_hz\": 1e6, \"stop_hz\": 3e9")
        if not (0 < start <= stop and 1 <= points <= _MAX_GRID_POINTS):
            raise ControlRequestError(f"a grid needs 0 < start_hz <= stop_hz and 1 <= points <= {_MAX_GRID_POINTS}")
        return np.linspace(float(start), float(stop), points)

    def _output(self, request: dict[str, Any], analyzer: SimulatedAnalyzer) -> tuple[BenchObject | None, int | None]:
        output = request.get("output")
        if output is None:
            return None, None
        if isinstance(output, str) and output.lower().startswith("port:"):
            try:
                port = int(output[5:])
            except ValueError:
                raise ControlRequestError(f"output {output!r}: write port:<number>, e.g. port:2") from None
            return None, self._port({"output port": port}, analyzer, "output port")
        return self._object(output, "output"), None

    # -- ops ------------------------------------------------------------------------------

    def _op_objects(self, request: dict[str, Any]) -> dict[str, Any]:
        return {"objects": [
            {"name": o.name, "kind": o.kind, "ports": o.ports, "description": o.description}
            for o in self.scenario.objects.values()
        ]}

    def _op_devices(self, request: dict[str, Any]) -> dict[str, Any]:
        return {"devices": [list(d) for d in self.scenario.devices]}

    def _op_connect(self, request: dict[str, Any]) -> dict[str, Any]:
        analyzer = self._instrument(request)
        if request.get("object") is None:
            raise ControlRequestError("connect needs an object name (ask op=objects)")
        thing = self._object(request.get("object"), "object")
        output, output_port = self._output(request, analyzer)
        reversed_ = request.get("reversed", False)
        if not isinstance(reversed_, bool):
            raise ControlRequestError("reversed must be true or false")
        try:
            analyzer.connect(self._port(request, analyzer), thing, output, output_port, reversed_)
        except ValueError as exc:
            raise ControlRequestError(str(exc)) from exc
        return {}

    def _op_disconnect(self, request: dict[str, Any]) -> dict[str, Any]:
        analyzer = self._instrument(request)
        analyzer.disconnect(self._port(request, analyzer))
        return {}

    def _op_truth(self, request: dict[str, Any]) -> dict[str, Any]:
        analyzer = self._instrument(request)
        return _complex_payload(analyzer.true_reflection(self._port(request, analyzer), self._grid(request, analyzer)))

    def _op_truth_s(self, request: dict[str, Any]) -> dict[str, Any]:
        analyzer = self._instrument(request)
        grid = self._grid(request, analyzer)
        if ("object" in request) == ("port" in request):
            raise ControlRequestError("truth_s needs either object (an object's own S-parameters) or port "
                                      "(the network between the analyzer's reference planes)")
        if "object" in request:
            thing = self._object(request["object"], "object")
            try:
                return {"s": _s_payload(thing.response(grid))}
            except ValueError as exc:
                raise ControlRequestError(str(exc)) from exc
        self._port(request, analyzer)
        return {"s": _s_payload(analyzer.true_network(grid))}

    def _op_error_terms(self, request: dict[str, Any]) -> dict[str, Any]:
        analyzer = self._instrument(request)
        model = analyzer.settings.model
        at = request.get("at", "now")
        if at not in ("now", "last_sweep"):
            raise ControlRequestError(f'at must be "now" or "last_sweep", got {at!r}')
        conditions = analyzer.last_conditions if at == "last_sweep" else None
        grid = self._grid(request, analyzer)
        if "direction" in request:
            if "port" in request:
                raise ControlRequestError("error_terms takes port or direction, not both")
            terms = analyzer.direction_terms(grid, conditions)
            direction = _text_field(request, "direction", "forward", "the driving direction", terms)
            if direction not in terms:
                raise ControlRequestError(f"direction must be one of {', '.join(terms)} on a {model!r} analyzer, "
                                          f"got {direction!r}")
            named = terms[direction].as_dict(one_port=model == "reflection")
        else:
            named = analyzer.port_terms(self._port(request, analyzer), grid, conditions).as_dict()
        return {"model": model, "terms": {name: _complex_payload(value) for name, value in named.items()}}

    def _op_set(self, request: dict[str, Any]) -> dict[str, Any]:
        if "noise" in request:
            if not isinstance(request["noise"], bool):
                raise ControlRequestError("noise must be true or false")
            self._instrument(request).noise_enabled = request["noise"]
        if "temperature_c" in request:
            value = request["temperature_c"]
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not -40 <= value <= 85:
                raise ControlRequestError(f"temperature_c must be a number from -40 to 85, got {value!r}")
            self.environment.set_temperature(float(value))
        return {}

    def _op_advance(self, request: dict[str, Any]) -> dict[str, Any]:
        seconds = request.get("seconds")
        if isinstance(seconds, bool) or not isinstance(seconds, (int, float)) or not 0 <= seconds <= 1e7:
            raise ControlRequestError(f"seconds must be a number from 0 to 1e7, got {seconds!r}")
        self.environment.advance(float(seconds))
        return self._conditions()

    def _conditions(self) -> dict[str, Any]:
        now = self.environment.now()
        return {"bench_seconds": now.seconds, "temperature_c": now.temperature_c}

    def _fault_plan(self, request: dict[str, Any]) -> FaultPlan:
        name = _text_field(request, "instrument", "analyzer", "an instrument's name", self.faults)
        if name not in self.faults:
            raise ControlRequestError(f"instrument: no instrument named {name!r} on this bench; "
                                      f"use one of {', '.join(self.faults) or 'none'}")
        return self.faults[name]

    def _op_fault(self, request: dict[str, Any]) -> dict[str, Any]:
        plan = self._fault_plan(request)
        try:
            fault = plan.arm(request)
        except FaultSpecError as exc:
            raise ControlRequestError(str(exc)) from exc
        return {"armed": fault.describe()}

    def _op_faults(self, request: dict[str, Any]) -> dict[str, Any]:
        if "instrument" in request:
            return {"faults": {request["instrument"]: self._fault_plan(request).describe()}}
        return {"faults": {name: plan.describe() for name, plan in self.faults.items()}}

    def _op_clear_faults(self, request: dict[str, Any]) -> dict[str, Any]:
        plans = [self._fault_plan(request)] if "instrument" in request else list(self.faults.values())
        for plan in plans:
            plan.clear()
        return {}

    def _op_switch(self, request: dict[str, Any]) -> dict[str, Any]:
        if self.switch is None:
            raise ControlRequestError("this bench has no switch matrix")
        return self.switch.describe()

    def _op_status(self, request: dict[str, Any]) -> dict[str, Any]:
        analyzer = self._instrument(request)
        return {"sweeps": analyzer.sweeps_done, "busy_seconds": analyzer.busy_seconds, **self._conditions(),
                "analyzers": {name: {"model": a.settings.model, "sweeps": a.sweeps_done,
                                     "last_sweep_s": a.last_sweep_s} for name, a in self.analyzers.items()}}


def _serve_line(controller: BenchController, line: bytes) -> dict[str, Any]:
    """The reply to one request line: whatever is wrong with it comes back as an error reply,
    and the connection stays open (PROTOCOLS.md §3)."""
    try:
        request = json.loads(line)
    except json.JSONDecodeError as exc:
        return {"ok": False, "error": f"not JSON ({exc.msg} at column {exc.colno}); "
                                      'send one JSON object per line, e.g. {"op": "status"}'}
    except UnicodeDecodeError:
        return {"ok": False, "error": "not UTF-8 text; send one JSON object per line"}
    except RecursionError:
        return {"ok": False, "error": "JSON nested too deeply to read; send one flat JSON object per line, "
                                      'e.g. {"op": "status"}'}
    try:
        return controller.handle(request)
    except ControlRequestError as exc:
        return {"ok": False, "error": str(exc)}
    except (TypeError, ValueError, RecursionError) as exc:
        # A field of a type no check above foresaw: an error reply, never a dropped link.
        op = request.get("op") if isinstance(request, dict) else None
        return {"ok": False, "error": f"{op}: the bench could not serve this request ({type(exc).__name__}: "
                                      f"{str(exc)[:200]}); check each field's type against PROTOCOLS.md §3 "
                                      "and the docstring of simulated-instruments/control.py"}


class _ControlHandler(socketserver.StreamRequestHandler):
    def handle(self) -> None:
        controller: BenchController = self.server.context  # type: ignore[attr-defined]
        while True:
            try:
                line = self.rfile.readline(_LINE_LIMIT)
            except OSError:
                return
            if not line:
                return
            if len(line) >= _LINE_LIMIT and not line.endswith(b"\n"):
                self._skip_rest_of_line()
                reply = {"ok": False, "error": f"request longer than {_LINE_LIMIT} bytes; send one short JSON "
                                               "object per line"}
                self._reply(reply)
                continue
            if not self._reply(_serve_line(controller, line)):
                return

    def _skip_rest_of_line(self) -> None:
        while True:
            chunk = self.rfile.readline(_LINE_LIMIT)
            if not chunk or chunk.endswith(b"\n"):
                return

    def _reply(self, reply: dict[str, Any]) -> bool:
        try:
            self.wfile.write(json.dumps(reply).encode() + b"\n")
        except OSError:
            return False
        return True


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
        """Send one request; raises :class:`ControlRequestError` with the bench's message."""
        self._socket.sendall(json.dumps({"op": op, **fields}).encode() + b"\n")
        line = self._reader.readline(_LINE_LIMIT * 64)
        if not line:
            raise ConnectionError("bench control channel closed")
        reply = json.loads(line)
        if not reply.get("ok"):
            raise ControlRequestError(reply.get("error", "unknown error"))
        return reply

    def connect(self, port: int, name: str, output: str | None = None, reversed: bool = False) -> None:
        """Connect object ``name`` to ``port``; ``output`` terminates a two-port's output
        (a one-port's name, or ``"port:2"``)."""
        fields: dict[str, Any] = {"port": port, "object": name, "output": output}
        if reversed:
            fields["reversed"] = True
        self.request("connect", **fields)

    def truth(self, port: int = 1, **grid: Any) -> np.ndarray:
        reply = self.request("truth", port=port, **grid)
        return np.array(reply["re"]) + 1j * np.array(reply["im"])

    def truth_s(self, **fields: Any) -> dict[str, np.ndarray]:
        """``truth_s(object="thru")`` or ``truth_s(port=1)``: named complex arrays."""
        reply = self.request("truth_s", **fields)["s"]
        return {name: np.array(v["re"]) + 1j * np.array(v["im"]) for name, v in reply.items()}

    def error_terms(self, **fields: Any) -> dict[str, np.ndarray]:
        """``error_terms(port=1)`` or ``error_terms(direction="forward")``: named complex arrays."""
        reply = self.request("error_terms", **fields)["terms"]
        return {name: np.array(v["re"]) + 1j * np.array(v["im"]) for name, v in reply.items()}

    def close(self) -> None:
        self._reader.close()
        self._socket.close()

    def __enter__(self) -> BenchControlClient:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
