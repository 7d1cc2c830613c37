"""What the profiled analyzer and switch share: a profile's operations sent over a session,
identity, reset and the error-queue check after each setting."""

from __future__ import annotations

from lineproof.drivers import ieee488
from lineproof.drivers.profiles import Operation, Profile
from lineproof.drivers.session import MessageSession
from lineproof.errors import InputError, ReplyError
from lineproof.values import InstrumentIdentity

#: IEEE 488.2 §11.5.1.1.2 (from memory): bit 7 of the standard event status register, Power On.
POWER_ON_BIT = 128


class ProfiledInstrument:
    """An instrument whose commands come from a profile."""

    def __init__(self, session: MessageSession, profile: Profile) -> None:
        self.session = session
        self.profile = profile
        #: A polled wait read the event status register and found the Power On bit, which
        #: that read cleared: kept here for the next :meth:`_powered_on`.
        self._power_on_seen = False

    @property
    def resource(self) -> str:
        return self.session.resource

    @property
    def recoveries(self) -> list[str]:
        """Failures the session recovered from by repeating an idempotent query."""
        return list(self.session.recoveries)

    def identify(self) -> InstrumentIdentity:
        """The four IEEE 488.2 §10.14 identity fields (from ``*IDN?`` or the profile's equivalent)."""
        reply = self._call("identify")
        try:
            return ieee488.parse_identity(reply, self.resource)
        except ieee488.CodecError as exc:
            raise ReplyError(str(exc), resource=self.resource, command=self._op("identify").send,
                             expected="maker, model, serial, firmware") from exc

    def reset(self) -> None:
        """Back to the instrument's power-on settings, with its status cleared.

        The wait that follows is allowed the longest ``timeout_s`` that the reset, clear and
        wait operations state (else the command timeout): ``*RST`` has no reply, so the time
        it takes shows only in the ``*OPC?`` after it (IEEE 488.2 §10.32, §12.5.3).
        """
        for name in ("reset", "clear"):
            if self.profile.operation(name):
                self._call(name)
        stated = [op.timeout_s for name in ("reset", "clear", "wait")
                  if (op := self.profile.operation(name)) is not None and op.timeout_s is not None]
        self._sync(max(stated, default=self.profile.timing.command_timeout_s))

    def close(self) -> None:
        self.session.close()

    def _op(self, name: str) -> Operation:
        operation = self.profile.operation(name)
        if operation is None:
            raise InputError(f"profile has no {name} operation", path=self.profile.source,
                             key=f"operations.{name}", fix=f"add {name} to [operations]")
        return operation

    def _call(self, name: str, timeout_s: float | None = None, **values: object) -> str | None:
        """Send an operation; returns its reply line for the one-line reply kinds."""
        operation = self._op(name)
        command = operation.render(**values)
        timeout = timeout_s or operation.timeout_s or self.profile.timing.command_timeout_s
        if operation.reply == "none":
            self.session.send(command, timeout, operation.idempotent)
            return None
        reply = self.session.query(command, timeout, operation.idempotent)
        if operation.reply == "complete":
            try:
                ieee488.parse_opc_reply(reply)
            except ieee488.CodecError as exc:
                raise ReplyError(str(exc), resource=self.resource, command=command, expected="1") from exc
        return reply

    def _setting(self, name: str, **values: object) -> None:
        """Apply one setting, if the profile has it, and check the instrument accepted it:
        draining the error queue after each setting names the command at fault."""
        if self.profile.operation(name) is None:
            return
        self._call(name, **values)
        self._check_errors(self._op(name).render(**values))

    def _sync(self, timeout_s: float | None = None) -> None:
        """Wait for pending operations to end: one ``*OPC?`` held open, or a status register
        polled (see :meth:`MessageSession.poll_status`)."""
        wait = self.profile.operation("wait")
        if wait is None:
            return
        timeout = timeout_s or wait.timeout_s or self.profile.timing.command_timeout_s
        if wait.reply != "status":
            self.session.wait_complete(wait.send, timeout)
            return
        seen = self.session.poll_status(wait.send, wait.done_bits, timeout, arm=wait.arm)
        event_status = self.profile.operation("event_status")
        if seen & POWER_ON_BIT and event_status is not None and _same_command(event_status.send, wait.send):
            self._power_on_seen = True

    def _powered_on(self) -> bool:
        """Whether the instrument has been powered on (or reset by a power glitch) since the
        event status register was last read; reading clears it.  False without the operation."""
        if self.profile.operation("event_status") is None:
            return False
        reply = self._call("event_status")
        seen, self._power_on_seen = self._power_on_seen, False
        try:
            return seen or bool(ieee488.parse_status_register(reply) & POWER_ON_BIT)
        except ieee488.CodecError as exc:
            raise ReplyError(f"event status {reply!r} is not an integer", resource=self.resource,
                             command=self._op("event_status").send, expected="0..255") from exc

    def _check_errors(self, caused_by: str | None = None) -> None:
        next_error = self.profile.operation("next_error")
        if next_error is not None:
            self.session.drain_errors(next_error.send, caused_by=caused_by)


def _same_command(first: str, second: str) -> bool:
    """The same SCPI query, ignoring case and surrounding space (headers are case-blind)."""
    return first.strip().upper() == second.strip().upper()
