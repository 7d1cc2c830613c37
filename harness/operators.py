"""Operators: who connects standards, terminations and devices to the analyzer.

- :class:`ConsoleOperator` -- a person at the bench, prompted on the console; enters or scans
  each device's serial number.  On a simulated bench its ``hands`` (a simulated operator) make
  the connection the person confirmed, so an attended flow can be rehearsed end to end.
- :class:`SwitchOperator` -- a switch matrix routes each named object or device slot to the
  analyzer's port (unattended runs), through :class:`lineproof.interfaces.Switch`.
- :class:`SimulatedOperator` -- connects objects on a simulated bench through its control
  channel, with no prompts.

All implement :class:`lineproof.interfaces.Operator`.
"""

from __future__ import annotations

from collections.abc import Callable, Collection, Mapping, Sequence

from lineproof.errors import InputError, LinkError
from lineproof.interfaces import Operator, Switch
from lineproof.station_file import BETWEEN_WIRING, PORT2_WIRING, REVERSED_WIRING
from lineproof.touchstone import SERIAL_RULE, serial_problem

#: Words a person may type at any prompt to stop the run between devices.
STOP_WORDS = frozenset({"stop", "quit", "q"})


class StopRequested(Exception):
    """The person at the bench asked to stop (typed a stop word), the input ended, or Ctrl-C
    came between a study's readings; ``reason`` says which.

    Not an error: the run stops between devices and can be resumed.
    """

    def __init__(self, reason: str = "stopped at the operator's request") -> None:
        super().__init__(reason)
        self.reason = reason


class SimulatedOperator:
    """Connects objects on a simulated bench through its control channel."""

    def __init__(self, control_address: str) -> None:
        from lineproof.simulators.control import BenchControlClient, ControlRequestError

        self._request_error = ControlRequestError
        try:
            self._client = BenchControlClient(control_address)
        except OSError as exc:
            raise LinkError(f"cannot reach the bench control channel ({exc})", resource=control_address) from exc
        self.log: list[str] = []

    def connect(self, port: int, thing: str, output: str | None, instruction: str,
                reversed: bool = False) -> None:
        self.log.append(instruction)
        try:
            self._client.connect(port, thing, output, reversed=reversed)
        except self._request_error as exc:
            raise LinkError(f"the simulated operator could not connect {thing} ({exc})") from exc

    def close(self) -> None:
        self._client.close()


class ConsoleOperator:
    """A person at the bench: one clear prompt per connection, serials entered or scanned.

    ``ask`` shows a prompt and returns the line typed (None when the input has ended).  A
    barcode scanner that types the serial and Enter works like the keyboard.
    """

    def __init__(self, ask: Callable[[str], str | None], hands: Operator | None = None) -> None:
        self._ask = ask
        self._hands = hands
        self.log: list[str] = []

    def _answer(self, prompt: str) -> str:
        answer = self._ask(prompt)
        if answer is None:
            # Nobody can answer any more (stdin closed, or a file of answers ran out): a clean
            # stop, not the person's choice, and the run can be resumed.
            raise StopRequested("input ended (stdin closed)")
        if answer.strip().lower() in STOP_WORDS:
            raise StopRequested()
        return answer.strip()

    def connect(self, port: int, thing: str, output: str | None, instruction: str,
                reversed: bool = False) -> None:
        self.log.append(instruction)
        self._answer(f"{instruction}. Press Enter when done (or type stop)")
        if self._hands is not None:
            self._hands.connect(port, thing, output, instruction, reversed=reversed)

    def acknowledge(self, text: str) -> None:
        """Show a message and wait until the person confirms it."""
        self.log.append(text)
        self._answer(f"{text}. Press Enter to go on (or type stop)")

    def scan_device(self, port: int, model: str, output: str | None, taken: Collection[str]) -> str | None:
        """Prompt to connect the next device and enter or scan its serial; None ends the batch.

        A serial that is not safe as a record name, or one already measured in this run
        (``taken``, compared ignoring case), is refused with the reason and asked again.
        """
        where = f" to port {port}, its output on {output}" if output else f" to port {port}"
        if output is not None and output.startswith("port:"):
            where = f" between port {port} (its input) and port {output[5:]} (its output)"
        prompt = (f"Connect the next {model}{where}, then enter or scan its serial "
                  "(Enter alone ends the batch, stop stops the run)")
        taken_lower = {serial.lower() for serial in taken}
        while True:
            serial = self._answer(prompt)
            if not serial:
                return None
            problem = serial_problem(serial)
            if problem is None and serial.lower() in taken_lower:
                problem = f"{serial} is already measured in this run"
            if problem is None:
                break
            prompt = f"{problem} ({SERIAL_RULE}). Enter or scan the serial again"
            if "already measured" in problem:
                prompt = f"{problem}: connect the next device and enter or scan its serial"
        self.log.append(f"connected {serial}")
        if self._hands is not None:
            self._hands.connect(port, serial, output, f"connect {serial}")
        return serial

    def close(self) -> None:
        close = getattr(self._hands, "close", None)
        if close is not None:
            close()


class SwitchOperator:
    """Connects by routing a switch matrix: each object or slot name maps to the channels that
    put it where it is asked for (the station's wiring tables: the station's port, port 2,
    between the ports, between them turned round); a device is found by its slot.

    A connection replaces whatever held the ports it involves and leaves the other port as it
    was -- as a person's hands would: port 2's load stays on while port 1's is connected, so a
    two-port calibration sweeps both at once.
    """

    def __init__(self, switch: Switch, wiring: Mapping[str, Sequence[str]], slots: Mapping[str, str] | None = None,
                 routes: Mapping[str, Mapping[str, Sequence[str]]] | None = None, home_port: int = 1) -> None:
        self.switch = switch
        self.tables: dict[str, Mapping[str, Sequence[str]]] = {"wiring": dict(wiring), **dict(routes or {})}
        self.slots = dict(slots or {})
        self.home_port = home_port
        self.log: list[str] = []
        self._held: dict[frozenset[int], tuple[str, ...]] = {}  # ports -> the channels holding them

    @property
    def wiring(self) -> Mapping[str, Sequence[str]]:
        return self.tables["wiring"]

    def _table(self, port: int, output: str | None, reversed: bool) -> str:
        if reversed:
            return REVERSED_WIRING
        if output is not None and output.startswith("port:"):
            return BETWEEN_WIRING
        return "wiring" if port == self.home_port else PORT2_WIRING

    def connect(self, port: int, thing: str, output: str | None, instruction: str,
                reversed: bool = False) -> None:
        name = self.slots.get(thing, thing)
        table = self._table(port, output, reversed)
        channels = self.tables.get(table, {}).get(name)
        if channels is None:
            raise InputError(f"{name!r} is not wired to the switch for this connection ({instruction})",
                             key=f"station.switch.{table}", fix=f"add it to the station's [switch.{table}]")
        ports = frozenset({port, 1 if port == 2 else 2}) if table in (BETWEEN_WIRING, REVERSED_WIRING) else frozenset({port})
        self._held = {held: kept for held, kept in self._held.items() if not held & ports}
        self._held[ports] = tuple(channels)
        self.log.append(f"{instruction} (switch: {', '.join(channels)})")
        self.switch.route([channel for kept in self._held.values() for channel in kept])

    def close(self) -> None:
        self.switch.close()
