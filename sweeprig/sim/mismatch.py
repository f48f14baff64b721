"""Port mismatch on the simulated bench: a reflection coefficient per connection.

Every junction of the simulated bench where power passes between two ports has a
reflection coefficient on each side: the bench's RF and LO feeds at the DUT input planes
(``source_rf``, ``source_lo``), the bench's output paths at the DUT output planes
(``load_if``, ``load_rf_port``, ``load_lo_port``), the power sensor (``sensor``) and the
part's own ports (``part_rf``, ``part_lo``, ``part_if``). Each Γ has the magnitude the
sim-bench description states (``[match]``) and a phase φ0 − 2π·f·τ that turns with
frequency (a connection's electrical length; φ0 and τ seeded from the description's
``seed``), so the mismatch error ripples across the band as on a real bench.

At a junction of Γa and Γb the wave that arrives is the matched one divided by
(1 − Γa·Γb), so the power moves by ``−20·log10|1 − Γa·Γb|`` dB, within the classic
mismatch-uncertainty limits 20·log10(1 ± |Γa||Γb|) (Pozar, *Microwave Engineering*,
mismatch; the field notes' relation).

What the figure's truth is (a decision, documented in docs/sim-bench.md too): the part's
gain between Z0 (50 Ω) terminations, as a datasheet states it. The simulated part is given
the incident wave that actually reaches it (the Z0 level moved by the junction's mismatch)
and its output wave reaches the analyzer moved by the output junction's; the calibration's
power sensor and calibration thru see their own junctions. None of this is corrected by a
calibration (scalar calibration cannot know the phases): it is an error that the figures'
uncertainty budget covers with its mismatch terms (:mod:`sweeprig.analysis.uncertainty`).
"""

from __future__ import annotations

import cmath
import math
import random
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

#: The ports that carry a reflection coefficient, in seeding order.
PORTS = ("source_rf", "source_lo", "load_if", "load_rf_port", "load_lo_port", "sensor",
         "part_rf", "part_lo", "part_if")


@dataclass(frozen=True)
class PortMatch:
    """The reflection coefficients of the bench's and the part's ports (magnitudes, 0 ≤ |Γ| <
    1) with seeded phase laws; ``delay_s``: the longest one-way electrical delay behind a
    port (its phase turns by 4π·f·τ, there and back)."""

    magnitudes: tuple[tuple[str, float], ...] = ()
    seed: int = 1
    delay_s: float = 5e-9

    def magnitude(self, port: str) -> float:
        for name, value in self.magnitudes:
            if name == port:
                return float(value)
        return 0.0

    def any(self) -> bool:
        """Whether any port is mismatched at all."""
        return any(v > 0 for _n, v in self.magnitudes)

    def _law(self, port: str) -> tuple[float, float]:
        return _phase_law(f"{self.seed}", self.delay_s, PORTS.index(port))

    def gamma(self, port: str, freq_hz: float) -> complex:
        """Γ of ``port`` at ``freq_hz``."""
        m = self.magnitude(port)
        if m == 0.0:
            return 0j
        phi0, tau = self._law(port)
        return cmath.rect(m, phi0 - 4.0 * math.pi * freq_hz * tau)

    def junction_db(self, port_a: str, port_b: str, freq_hz: float) -> float:
        """How far the power crossing the junction of two ports moves by their mismatch, dB:
        ``−20·log10|1 − Γa·Γb|`` (positive: more power than into a matched port)."""
        product = self.gamma(port_a, freq_hz) * self.gamma(port_b, freq_hz)
        return -20.0 * math.log10(abs(1.0 - product)) if product else 0.0

    def junction_db_array(self, port_a: str, port_b: str, freq_hz: np.ndarray) -> np.ndarray:
        """:meth:`junction_db` at each frequency (Hz)."""
        f = np.asarray(freq_hz, dtype=float)
        ma, mb = self.magnitude(port_a), self.magnitude(port_b)
        if ma == 0.0 or mb == 0.0:
            return np.zeros(f.shape)
        (pa, ta), (pb, tb) = self._law(port_a), self._law(port_b)
        product = ma * mb * np.exp(1j * (pa + pb - 4.0 * np.pi * f * (ta + tb)))
        return -20.0 * np.log10(np.abs(1.0 - product))


@lru_cache(maxsize=64)
def _phase_law(seed: str, delay_s: float, index: int) -> tuple[float, float]:
    """(φ0 rad, τ s) of the port at ``index`` of :data:`PORTS`: φ0 uniform in [−π, π), τ in
    [0.2, 1]·delay_s, from ``random.Random("match/<seed>/<index>")`` (``seed`` as it is
    spelt; drawn once per law: seeding hashes its string, which cost more than the rest of
    a junction)."""
    rng = random.Random(f"match/{seed}/{index}")
    return rng.uniform(-math.pi, math.pi), rng.uniform(0.2, 1.0) * delay_s
