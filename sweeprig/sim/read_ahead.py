"""The simulated bench evaluating ahead the points of a sweep it recognises.

The engine asks for the points of a sweep one by one (set a source, read the analyzer). When
the last three model evaluations the world needed differ only in the input tones, stepped
by one constant step (a power sweep: every tone's power up by the same dB; or a frequency
step), the next points of that progression are predictable: the world evaluates them
together with the present one in one :meth:`MixerPart.evaluate_many` call (the vectorised
sweep path) and keeps their responses. A later request takes one only when its tones match
the predicted ones within :data:`POWER_TOL_DB`, :data:`FREQ_TOL_HZ` and
:data:`PHASE_TOL_RAD` (the responses then differ by less than the model's own 1e-9 dB
equivalence; the world records the predicted inputs as what the model was given, so the
truth queries evaluate exactly those); anything else is evaluated on demand, as before.

Units: dB, Hz, radians. Pure bookkeeping: no instrument, no SCPI, no model maths.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass

from sweeprig.sim.mixer.types import MixerResponse, ToneInput

#: A request takes a predicted point whose tone powers are this close, dB: a response moves
#: by at most a few times the input's change (third order: 3 dB per dB), far inside 1e-9 dB.
POWER_TOL_DB = 1e-10
#: ... and whose tone frequencies are this close, Hz (about the rounding of a tone
#: frequency of some GHz stepped a few times; the model's own line frequencies carry
#: about 1e-6 Hz of rounding).
FREQ_TOL_HZ = 1e-5
#: ... and whose tone phases are this close, rad.
PHASE_TOL_RAD = 1e-12
#: Points evaluated ahead at first; doubled (up to :data:`MAX_AHEAD`) while a batch is used
#: to its end, back to this when one is not.
FIRST_AHEAD = 8
MAX_AHEAD = 32
#: After a batch none of whose points was asked for, this many misses evaluate on demand
#: only (a progression that the requests do not follow costs nothing more).
COOL_DOWN = 8

TonesKey = tuple[ToneInput, ...]


@dataclass(frozen=True)
class SweepContext:
    """Everything of an evaluation but the input tones' frequencies, powers and phases:
    the LO, supply volts, die temperature key (degC) and the tones' harmonics (dBc)."""

    lo: ToneInput | None
    volts: float
    temperature_c: float
    harmonics: tuple[tuple[float, ...], ...]


def context_of(lo: ToneInput | None, rf: TonesKey, volts: float,
               temperature_c: float) -> SweepContext:
    """The context of one evaluation's inputs."""
    return SweepContext(lo, volts, temperature_c, tuple(t.harmonics_dbc for t in rf))


def _vector(rf: TonesKey) -> tuple[float, ...]:
    return tuple(v for t in rf for v in (t.freq_hz, t.power_dbm, t.phase_rad))


_TOLERANCES = (FREQ_TOL_HZ, POWER_TOL_DB, PHASE_TOL_RAD)


def _close(a: tuple[float, ...], b: tuple[float, ...]) -> bool:
    return all(abs(x - y) <= _TOLERANCES[i % 3] for i, (x, y) in enumerate(zip(a, b,
                                                                                strict=True)))


class ReadAhead:
    """Recognises a stepped sweep among the world's model evaluations and keeps the
    responses evaluated ahead for it (not thread-safe: the world holds its lock)."""

    def __init__(self) -> None:
        self._history: deque[tuple[SweepContext, tuple[float, ...]]] = deque(maxlen=2)
        self._context: SweepContext | None = None
        self._ahead: list[tuple[tuple[float, ...], TonesKey, MixerResponse]] = []
        self._size = FIRST_AHEAD
        self._batch = 0  # points of the present batch
        self._used = 0  # of which asked for
        self._cool = 0
        self.served = 0  # requests answered from a batch, for tests and benchmarks
        self.evaluated = 0  # points evaluated ahead

    def take(self, context: SweepContext, rf: TonesKey) -> tuple[TonesKey, MixerResponse] | None:
        """The response evaluated ahead for these inputs and the tones it was evaluated
        for (within the tolerances), or None. The next predicted point is looked at, and
        the one after it (a point asked for twice in a row is in the world's cache)."""
        if context != self._context or not self._ahead:
            return None
        vector = _vector(rf)
        for i, (predicted, tones, response) in enumerate(self._ahead[:2]):
            if len(predicted) == len(vector) and _close(predicted, vector):
                del self._ahead[: i + 1]
                self._history.append((context, vector))
                self._used += 1
                self.served += 1
                return tones, response
        return None

    def plan(self, context: SweepContext, rf: TonesKey) -> list[TonesKey]:
        """Record an evaluation the world has to make; the tone sets to evaluate ahead
        with it (empty unless it continues the last two by their constant step)."""
        vector = _vector(rf)
        history = [v for c, v in self._history if c == context and len(v) == len(vector)]
        self._history.append((context, vector))
        if self._ahead or self._batch:  # a batch ended, or was left: judge it
            fully = self._used >= self._batch
            if self._used == 0:
                self._cool = COOL_DOWN
            self._size = min(2 * self._size, MAX_AHEAD) if fully else FIRST_AHEAD
            self._ahead, self._batch, self._used = [], 0, 0
        if self._cool:
            self._cool -= 1
            return []
        if len(history) < 2 or not rf:
            return []
        step = [b - a for a, b in zip(history[1], vector, strict=True)]
        before = [b - a for a, b in zip(history[0], history[1], strict=True)]
        if not any(step) or not _close(tuple(step), tuple(before)):
            return []
        sets = []
        for k in range(1, self._size + 1):
            values = [v + k * s for v, s in zip(vector, step, strict=True)]
            tones = tuple(
                ToneInput(values[3 * i], values[3 * i + 1], values[3 * i + 2], t.harmonics_dbc)
                for i, t in enumerate(rf))
            if any(not t.freq_hz > 0.0 for t in tones):
                break
            sets.append(tones)
        return sets

    def store(self, context: SweepContext, sets: list[TonesKey],
              responses: list[MixerResponse]) -> None:
        """Keep the responses evaluated ahead for ``sets`` (in their order)."""
        self._context = context
        self._ahead = [(_vector(t), t, r) for t, r in zip(sets, responses, strict=True)]
        self._batch, self._used = len(sets), 0
        self.evaluated += len(sets)
