"""Spectrum analyzer driver (role ``sa``): configuration, single sweeps, markers, traces."""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np

from sweeprig.errors import InputError
from sweeprig.instruments.driver import Driver
from sweeprig.instruments.trace import Trace


@dataclass(frozen=True)
class AnalyzerSettings:
    """One analyzer configuration; ``None`` leaves a setting as it is.

    Frequencies in Hz, ``ref_level_dbm`` in dBm, ``attenuation_db`` in dB, ``averages`` ≥ 1.
    """

    centre_hz: float | None = None
    span_hz: float | None = None
    rbw_hz: float | None = None
    vbw_hz: float | None = None
    ref_level_dbm: float | None = None
    attenuation_db: float | None = None
    averages: int | None = None
    points: int | None = None


class AnalyzerDriver(Driver):
    """A swept spectrum analyzer used in single-sweep mode with marker 1."""

    kind = "analyzer"
    #: What a previous user may have left set that moves every level it reports (read once,
    #: at connect).
    left_setting_ops = ("ref_level_offset", "corrections")

    def prepare(self) -> None:
        """The profile's ``prepare`` commands, then the sample (log envelope) detector where
        the profile sets detectors (the noise floor of every reading is estimated for it; an
        earlier user's peak or power detector would bias it), then single-sweep mode (one
        message where the profile allows compound messages)."""
        with self.joined():
            super().prepare()
            if self.profile.has("detector"):
                self.set_value("detector", "sample", force=True)
            self.single_sweep_mode()
            self.enable_status()

    def enable_status(self) -> int:
        """Enable the questionable bits the ``overload`` and ``uncalibrated`` flags read, so
        that they also feed the status byte's summary bit (SCPI-99 Vol. 1, status reporting,
        from memory); returns the mask enabled (0 when the profile has no such command)."""
        if not self.profile.has("status_enable"):
            return 0
        mask = 0
        for op in ("overload", "uncalibrated"):
            if self.profile.has(op):
                mask |= self.profile.op(op).mask or 0
        self.do("status_enable", mask)
        return mask

    def single_sweep_mode(self) -> bool:
        """Continuous sweep off: each :meth:`sweep` takes exactly one (averaged) sweep."""
        return self.set_value("continuous", False)

    def configure(
        self,
        centre_hz: float | None = None,
        span_hz: float | None = None,
        rbw_hz: float | None = None,
        vbw_hz: float | None = None,
        ref_level_dbm: float | None = None,
        attenuation_db: float | None = None,
        averages: int | None = None,
        points: int | None = None,
    ) -> int:
        """Apply the given settings (unchanged ones are not re-sent); return how many were sent.

        Order: reference level and attenuation first (the input is protected before the
        frequency moves), then centre, span, RBW, VBW, points, averages. Setting RBW or the
        attenuation by value turns its coupling (``*_auto``) off when the profile has it.
        """
        try:
            sent = self._configure(centre_hz, span_hz, rbw_hz, vbw_hz, ref_level_dbm,
                                   attenuation_db, averages, points)
        except BaseException:
            self._sweep_time = self._axis = None
            raise
        if sent:
            self._sweep_time = self._axis = None  # settings changed: ask the analyzer again
        return sent

    def forget_state(self) -> None:
        """Forget the cached settings, the sweep time read for them and the memo of the last
        configuration that sent nothing."""
        super().forget_state()
        self._sweep_time = self._axis = None
        self._unchanged_memo = None

    _sweep_time: tuple[float, int] | None = None
    _axis: tuple[float, float, int | None] | None = None
    #: the last :meth:`configure` that sent nothing: its arguments, and each setting's cache
    #: entry and limits object as they were then (see :meth:`_unchanged`)
    _unchanged_memo: tuple[tuple[object, ...], tuple[tuple[str, object, object], ...]] | None \
        = None

    def _settings(self, centre_hz: float | None, span_hz: float | None,
                  rbw_hz: float | None, vbw_hz: float | None, ref_level_dbm: float | None,
                  attenuation_db: float | None, averages: int | None,
                  points: int | None) -> list[tuple[str, object]]:
        """The (setting, value) pairs of a configuration, in the order they are sent."""
        settings: list[tuple[str, object]] = []
        if ref_level_dbm is not None:
            settings.append(("ref_level", ref_level_dbm))
        if attenuation_db is not None:
            if self.profile.has("attenuation_auto"):
                settings.append(("attenuation_auto", False))
            settings.append(("attenuation", attenuation_db))
        if centre_hz is not None:
            settings.append(("centre", centre_hz))
        if span_hz is not None:
            settings.append(("span", span_hz))
        if rbw_hz is not None:
            if self.profile.has("rbw_auto"):
                settings.append(("rbw_auto", False))
            settings.append(("rbw", rbw_hz))
        if vbw_hz is not None:
            settings.append(("vbw", vbw_hz))
        if points is not None:
            settings.append(("points", points))
        if averages is not None:
            settings.append(("averages", averages))
        return settings

    def _unchanged(self, args: tuple[object, ...]) -> int | None:
        """How many settings a :meth:`configure` with ``args`` would skip, when it would send
        nothing: the same arguments as the last configuration that sent nothing, and every
        setting's cache entry and limits still the very objects they were then (a setting
        sent, forgotten or refused since replaces or drops its entry; a tightened limit is a
        new object), so each :meth:`set_value` would find its value checked and cached.
        None: go through :meth:`set_value` (a NaN never equals itself, so it is always
        checked, and refused)."""
        memo = self._unchanged_memo
        if memo is None or memo[0] != args:
            return None
        cache, limits = self._cache, self._limits
        for op, entry, bound in memo[1]:
            if cache.get(op) is not entry or limits.get(op) is not bound:
                return None
        return len(memo[1])

    def _configure(self, centre_hz: float | None, span_hz: float | None,
                   rbw_hz: float | None, vbw_hz: float | None, ref_level_dbm: float | None,
                   attenuation_db: float | None, averages: int | None,
                   points: int | None) -> int:
        args = (centre_hz, span_hz, rbw_hz, vbw_hz, ref_level_dbm, attenuation_db, averages,
                points)
        skipped = self._unchanged(args)
        if skipped is not None:  # a run's readings mostly ask for the settings they have
            self.settings_skipped += skipped
            return 0
        self._unchanged_memo = None
        settings = self._settings(*args)
        sent = 0
        for op, value in settings:
            sent += self.set_value(op, value)  # type: ignore[arg-type]
        if not sent:
            self._unchanged_memo = (args, tuple(
                (op, self._cache.get(op), self._limits.get(op)) for op, _ in settings))
        return sent

    def apply(self, settings: AnalyzerSettings) -> int:
        """:meth:`configure` from an :class:`AnalyzerSettings`."""
        return self.configure(
            centre_hz=settings.centre_hz,
            span_hz=settings.span_hz,
            rbw_hz=settings.rbw_hz,
            vbw_hz=settings.vbw_hz,
            ref_level_dbm=settings.ref_level_dbm,
            attenuation_db=settings.attenuation_db,
            averages=settings.averages,
            points=settings.points,
        )

    def sweep(self, expected_s: float | None = None) -> None:
        """Start one sweep (all averages) and wait until it is complete.

        ``expected_s``: how long the sweep should take, s; the wait then ends after twice
        that plus the transport's own timeout (never beyond the profile's limit), so a lost
        reply costs seconds, not the profile's worst case.
        """
        limit = None
        if expected_s is not None:
            limit = 2.0 * expected_s + float(getattr(self.transport, "timeout_s", 5.0))
        self.do("sweep", timeout_s=limit)

    def sweep_time_s(self) -> float:
        """Time of one sweep, s, as the analyzer reports it."""
        return float(self.ask("sweep_time"))

    def expected_sweep_s(self, averages: int, planned_s: float | None, *,
                         status: bool = False) -> tuple[float | None, str]:
        """How long the next :meth:`sweep` (all ``averages``) should take, s, and where that
        comes from: the analyzer's own sweep time (``SWEep:TIME?``, the profile's
        ``sweep_time``) times the averages, asked once per configuration, or ``planned_s``
        (the planner's model) when the profile has no such query.

        The analyzer knows its couplings, minimum sweep times and detector dwell; a model of
        them does not (issue: a sweep wait taken from the model alone).

        ``status``: read the event status register in the same message where the profile
        allows compound messages (then taken by ``check_errors``/``point_status``)."""
        if not self.profile.has("sweep_time"):
            return planned_s, "plan"
        if self._sweep_time is None or self._sweep_time[1] != averages:
            if status and self.compound:
                (reply,) = self.ask_joined(("sweep_time", None), status=True)
                self._sweep_time = (float(reply), averages)
            else:
                self._sweep_time = (self.sweep_time_s(), averages)
        return self._sweep_time[0] * max(1, averages), "instrument"

    def marker_level_dbm(self, freq_hz: float) -> float:
        """Put marker 1 at ``freq_hz`` and read its level, dBm (from the last sweep)."""
        return float(self.ask("marker_level", freq_hz))

    def sweep_and_read(self, expected_s: float | None, freq_hz: float,
                       noise_hz: tuple[float, ...] = ()) -> tuple[float, tuple[float, ...], bool]:
        """:meth:`sweep`, then :meth:`marker_reading`: one message where the profile allows
        compound messages and the sweep completes by ``*OPC?`` (the instrument's
        no-operation-pending flag follows the sweep): ``INIT;*WAI;`` before the marker queries,
        ``*WAI`` holding them until the sweep has ended (IEEE 488.2 10.39, from memory), with
        the sweep's own wait as the reply's timeout."""
        op = self.profile.op("sweep")
        completion = op.completion
        if not (self.compound and completion is not None and completion.method == "opc"):
            self.sweep(expected_s)
            return self.marker_reading(freq_hz, noise_hz)
        limit = completion.timeout_s
        if expected_s is not None:
            limit = min(limit, 2.0 * expected_s + float(getattr(self.transport, "timeout_s",
                                                                  5.0)))
        with self.joined():
            for template in op.commands:
                self._send(template)
            self._send("*WAI")
            return self.marker_reading(freq_hz, noise_hz, timeout_s=limit)

    def marker_reading(self, freq_hz: float, noise_hz: tuple[float, ...] = (), *,
                       timeout_s: float | None = None
                       ) -> tuple[float, tuple[float, ...], bool]:
        """Marker 1 at ``freq_hz`` (level, dBm), then at each of ``noise_hz`` (levels, dBm),
        the overload flag, and the event status register (kept for
        :meth:`~sweeprig.instruments.driver.Driver.point_status`): one message where the
        profile allows compound messages."""
        asks: list[tuple[str, float | None]] = [("marker_level", freq_hz)]
        asks += [("marker_level", f) for f in noise_hz]
        asks.append(("overload", None))
        # its reference's lock and its uncalibrated flag at the reading (in the same message
        # where joined; one query where they read the overload flag's register)
        lock, uncal = self._reading_flags
        asks += [(op, None) for op, ask in (("reference_unlocked", lock),
                                            ("uncalibrated", uncal)) if ask]
        replies = self.ask_joined(*asks, status=True, timeout_s=timeout_s)
        self.uncalibrated_seen = bool(replies.pop()) if uncal else None
        self.reference_unlocked_seen = bool(replies.pop()) if lock else None
        return (float(replies[0]), tuple(float(r) for r in replies[1:-1]),
                bool(replies[-1]))

    #: Whether the last :meth:`marker_reading` found the reference unlocked, and the
    #: reading flagged uncalibrated (None: the profile cannot tell, or no reading yet).
    reference_unlocked_seen: bool | None = None
    uncalibrated_seen: bool | None = None

    @functools.cached_property
    def _reading_flags(self) -> tuple[bool, bool]:
        """Whether the profile can ask (its reference lock, its uncalibrated flag) with a
        marker reading (plain queries); worked out once, asked at every reading."""
        return self.plain_query("reference_unlocked"), self.plain_query("uncalibrated")

    def peak(self) -> tuple[float, float]:
        """Marker 1 to the highest point of the trace → (frequency Hz, level dBm)."""
        freq_hz, level_dbm = self.ask("peak")
        return float(freq_hz), float(level_dbm)

    def trace(self, *, binary: bool | None = None) -> np.ndarray:
        """The trace of the last sweep, dBm per point (float64).

        ``binary``: True = REAL,32 block, False = ASCII, None = REAL,32 when the profile has
        it (fewer bytes, no rounding).
        """
        use_binary = self.profile.has("trace_real32") if binary is None else binary
        op = "trace_real32" if use_binary else "trace_ascii"
        if not self.profile.has(op):
            raise InputError(
                f"driver profile {self.profile.name!r} has no {op!r}",
                where=f"role {self.role!r}",
                fix="read the trace in the other format, or add the operation to the profile",
            )
        if self.profile.has("trace_format"):
            self.set_value("trace_format", "real32" if use_binary else "ascii")
        return np.asarray(self.ask(op), dtype=np.float64)

    def read_trace(self) -> Trace:
        """The last sweep's trace with its axis as the analyzer reports it (centre and span
        read back once per configuration, the point count read back when the profile can).
        """
        levels = self.trace()
        if self._axis is None:
            ops = ["centre", "span"]
            if self.profile.has("points") and self.profile.op("points").read_back is not None:
                ops.append("points")
            values = self.read_backs(*ops)  # one message where the profile allows it
            points = int(values[2]) if len(values) > 2 else None  # type: ignore[arg-type]
            self._axis = (float(values[0]), float(values[1]), points)
        centre, span, points = self._axis
        return Trace.from_centre_span(centre, span, levels, points)

    def sweep_flags(self) -> tuple[bool, bool | None]:
        """(overloaded, uncalibrated) of the last sweep, in one message where the profile
        joins them (one query where both flags are bits of one register); uncalibrated None
        where the profile cannot ask it as a plain query."""
        uncal = self._reading_flags[1]
        replies = self.ask_joined(("overload", None), *([("uncalibrated", None)] if uncal
                                                          else []))
        return bool(replies[0]), (bool(replies[1]) if uncal else None)
