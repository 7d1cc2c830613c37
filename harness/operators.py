"""Operators: who connects standards, terminations and devices to the analyzer."""

from __future__ import annotations

from lineproof.errors import LinkError


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
