"""A switch matrix driven by a profile: the harness's ``Switch`` (identify, route, close)
over a message session.

``route`` is confirmed by reading back the state of every channel: a relay that did not
close, or one left closed, is an error naming the channels, never a silent misroute.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from lineproof.drivers import ieee488
from lineproof.drivers.instrument import ProfiledInstrument
from lineproof.drivers.profiles import SwitchCapabilities, SwitchProfile
from lineproof.drivers.session import MessageSession
from lineproof.errors import InputError, ReplyError


class ProfiledSwitch(ProfiledInstrument):
    """The switch interface of the harness, implemented from a profile."""

    profile: SwitchProfile

    def __init__(self, session: MessageSession, profile: SwitchProfile) -> None:
        super().__init__(session, profile)
        self.capabilities: SwitchCapabilities = profile.capabilities

    def route(self, channels: Sequence[str]) -> None:
        """Open every channel, close exactly ``channels`` (``"1!3"`` entries) and confirm the
        closed set by reading the state of every channel back."""
        wanted = self._parse(channels)
        if self.profile.operation("open_all"):
            self._setting("open_all")
        else:
            self._setting("open_channels", channels=self._all_channels())
        if wanted:
            self._setting("close_channels", channels=ieee488.format_channel_list(wanted))
        self._sync()
        self._confirm(set(wanted))

    def closed_channels(self) -> list[str]:
        """The channels the switch reports closed, as ``"module!channel"`` entries."""
        states = self._states()
        return [f"{m}!{c}" for (m, c), state in states.items() if state]

    # -- helpers ----------------------------------------------------------------------

    def _parse(self, channels: Sequence[str]) -> list[tuple[int, int]]:
        caps = self.capabilities
        entries = []
        for text in channels:
            try:
                module, channel = ieee488.parse_channel(text)
            except ieee488.CodecError as exc:
                raise InputError(str(exc), key="route", fix="write channels as module!channel, e.g. 1!3") from exc
            if not (1 <= module <= caps.modules and 1 <= channel <= caps.channels_per_module):
                raise InputError(
                    f"channel {text} does not exist on this switch ({caps.modules} module(s) of "
                    f"{caps.channels_per_module} channels)", path=self.profile.source, key="capabilities",
                )
            if (module, channel) not in entries:
                entries.append((module, channel))
        return entries

    def _all_channels(self) -> str:
        return ieee488.format_channel_ranges(self.capabilities.modules, self.capabilities.channels_per_module)

    def _states(self) -> dict[tuple[int, int], bool]:
        caps = self.capabilities
        operation = self._op("query_closed")
        command = operation.render(channels=self._all_channels())
        values = self.session.query_numbers(command, operation.timeout_s, operation.idempotent)
        order = [(m, c) for m in range(1, caps.modules + 1) for c in range(1, caps.channels_per_module + 1)]
        if values.size != len(order) or not np.all((values == 0) | (values == 1)):
            raise ReplyError(f"got {values.size} values {values[:8].tolist()}...", resource=self.resource,
                             command=command, expected=f"{len(order)} values, each 1 (closed) or 0 (open)")
        return {entry: bool(value) for entry, value in zip(order, values, strict=True)}

    def _confirm(self, wanted: set[tuple[int, int]]) -> None:
        states = self._states()
        closed = {entry for entry, state in states.items() if state}
        if closed != wanted:
            def names(entries: set[tuple[int, int]]) -> str:
                return ", ".join(f"{m}!{c}" for m, c in sorted(entries)) or "none"
            raise ReplyError(
                f"switch reports {names(closed)} closed (not closed: {names(wanted - closed)}; "
                f"closed but not asked: {names(closed - wanted)})",
                resource=self.resource, command=self.session.last_command,
                expected=f"exactly {names(wanted)} closed",
            )
