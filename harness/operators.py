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
from lineproof.touchstone import SERIAL_RULE, serial_problem

#: Words a person may type at any prompt to stop the run between devices.
STOP_WORDS = frozenset({"stop", "quit", "q"})


class StopRequested(Exception):
    """The person at the bench asked to stop (typed a stop word, or the input ended).

    Not an error: the run stops between devices and can be resumed.
    """


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
        if answer is None or answer.strip().lower() in STOP_WORDS:
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
        where = f", its output on {output}" if output else ""
        prompt = (f"Connect the next {model} to port {port}{where}, then enter or scan its serial "
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
    put it on the analyzer's port (the station's wiring); a device is found by its slot."""

    def __init__(self, switch: Switch, wiring: Mapping[str, Sequence[str]], slots: Mapping[str, str] | None = None) -> None:
        self.switch = switch
        self.wiring = dict(wiring)
        self.slots = dict(slots or {})
        self.log: list[str] = []

    def connect(self, port: int, thing: str, output: str | None, instruction: str,
                reversed: bool = False) -> None:
        if reversed:
            raise InputError(f"a switch cannot turn {thing} round", key="calibration.method",
                             fix="on a switch station use a method that needs no reversed device (not one-path)")
        name = self.slots.get(thing, thing)
        channels = self.wiring.get(name)
        if channels is None:
            raise InputError(f"{name!r} is not wired to the switch", key="station.switch.wiring",
                             fix="add it to the station's switch wiring")
        self.log.append(f"{instruction} (switch: {', '.join(channels)})")
        self.switch.route(list(channels))

    def close(self) -> None:
        self.switch.close()
