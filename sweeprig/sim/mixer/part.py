"""A mixer part: its file format, loading and validation, and its evaluation.

Part-file schema (TOML). Quantities may be written with units ("4 mA", "2.4 GHz", "200 ohm",
"15 dB"); a bare number is in the internal unit (A, Hz, ohm, dB, V, degC, dBm). Keys marked
*optional* may be left out.

``[part]``
    ``name`` (text, required), ``description`` (text, optional),
    ``conversion`` = ``"down"`` (default: the RF port feeds the transconductor, the IF port
    is the output) or ``"up"`` (the IF port feeds the transconductor, the RF port is the
    output; the wanted output is the sum frequency).
``[core]``
    ``tail_current`` I_EE at the nominal supply (and, for PTAT bias, at
    ``reference_temperature``), required; ``emitter_degeneration`` R_E per emitter (default
    0 ohm); ``cells`` number of Gilbert cells drawing I_EE each (default 1);
    ``bias`` = ``"constant"`` (I_EE independent of temperature, default) or ``"ptat"``
    (I_EE ∝ absolute temperature, G_m constant); ``reference_temperature`` (default 25 degC);
    ``nominal_supply`` (default 3.3 V); ``min_supply`` below which the bias is off
    (default 0 V); ``tail_supply_coeff`` k_v, per volt: I_EE = I0·(1 + k_v·(V − V_nom))
    (default 0); ``aux_current`` current of LO buffers etc. at the nominal supply (default 0 A);
    ``aux_supply_coeff`` per volt, same law (default 0); ``cm_second_order`` c2, the
    transconductor's common-mode current moving as ``c2·I_EE·u²`` (u = v/(2·VT + I_EE·R_E),
    default 0: an ideal tail; with ``mismatch.load`` it sets a realistic IIP2, see
    :mod:`sweeprig.sim.mixer.realism`).
``[mismatch]`` (optional)
    ``quad_offset_1``, ``quad_offset_2`` input offsets of the two switching pairs;
    ``rf_pair_offset`` input offset of the transconductor pair (all default 0 V). Quad offsets
    give even LO harmonics, RF feedthrough and (with the RF offset) a finite IIP2; the RF
    offset gives LO→IF leakage. ``load``: load-resistor mismatch ΔR/R (default 0), which
    turns the common-mode current (``core.cm_second_order``) into a differential IM2.
``[ports.rf]``, ``[ports.lo]``, ``[ports.if]``
    ``resistance``: the differential resistance at the core behind an ideal balun from 50 ohm
    (input resistance R_in at the transconductor input and LO ports, load R_L at the output
    port), required; ``return_loss`` (dB, optional: perfect match); ``highpass`` and
    ``lowpass`` first-order corner frequencies (optional: flat).
``[isolation]`` (optional; dB, positive; a missing key means no extra leakage path)
    ``lo_to_rf``, ``lo_to_if`` (LO coupled straight to the port, on top of what the core
    makes), ``rf_to_if`` (feedthrough between the RF and IF ports, on top of what mismatch
    makes), ``rf_to_lo``: each at ``reference_frequency`` (default 1 GHz). Each path may
    change with frequency: ``lo_to_rf_slope`` (and ``lo_to_if_slope``, ``rf_to_if_slope``,
    ``rf_to_lo_slope``), dB per octave (default 0: flat), so a line at f leaks through
    ``isolation + slope·log2(f/reference_frequency)`` dB (a coupling capacitance gives
    about −6 dB per octave: its admittance doubles with f).
``[noise]``
    ``figure`` SSB noise figure at ``core.reference_temperature`` (required);
    ``figure_tempco`` dB per degC (default 0); ``lo_nominal``: the LO power (dBm at the LO
    port) at which ``figure`` holds (optional: without it the noise figure does not depend
    on the LO drive); ``switch_share``: the switching quad's share of the excess noise at
    that drive (default 0.3). Below ``lo_nominal`` the noise figure rises as the quad spends
    longer with both transistors of a pair on (see :mod:`sweeprig.sim.mixer.realism`).
``[model]`` (optional, numerical settings)
    ``max_lo_order`` (default 9: the highest LO harmonic kept in the output lines; spur
    tables rarely go past 5), ``max_rf_order`` (Σ|n_k|, default 9), ``floor`` lines
    below this power are dropped (default −180 dBm: 20 dB under the lowest displayed noise
    of the simulated analyzer, −174 dBm/Hz + 14 dB at 1 Hz RBW and 0 dB attenuation).

Evaluation conventions: powers in dBm at the part's own port planes (available power for
inputs, power into a matched 50 ohm load for outputs); frequencies in Hz; phases in radians.
The port networks act on magnitudes only. ``MixerResponse.if_port`` holds the output port's
lines and ``rf_port`` the transconductor input port's lines (for an upconverter these are
the RF and IF ports respectively).
"""

from __future__ import annotations

import cmath
import math
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from functools import lru_cache
from pathlib import Path
from typing import Annotated, Any, Literal, NamedTuple

import numpy as np
from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    model_validator,
)
from pydantic_core import PydanticCustomError

from sweeprig.errors import InputError, UnitError
from sweeprig.formats.loading import load_document, validation_error
from sweeprig.sim.mixer.core import (
    KT0_DBM_PER_HZ,
    pair_slope_per_v,
    tail_current_a,
    thermal_voltage_v,
)
from sweeprig.sim.mixer.multitone import (
    MERGE_TOL_HZ,
    CellState,
    Lines,
    LineTable,
    LoFactor,
    RfFactor,
    add_lines,
    combine_on,
    combo_tuples,
    concat_lines,
    lo_factor,
    merge_coincident,
    rf_factor,
    rf_grid_shape,
)
from sweeprig.sim.mixer.network import band_magnitude, reflection_magnitude
from sweeprig.sim.mixer.realism import (
    CommonModeLayout,
    LeakagePhases,
    LeakPhase,
    common_mode_im2_amplitudes,
    common_mode_names,
    lo_drive_noise_factor,
    switch_overlap_fraction,
)
from sweeprig.sim.mixer.sweep import evaluate_group
from sweeprig.sim.mixer.types import (
    DeferredPort,
    MixerResponse,
    OperatingPoint,
    PortLevels,
    Product,
    ToneInput,
)
from sweeprig.sim.names import PARTS_DIR
from sweeprig.sim.names import shipped_parts as shipped_parts
from sweeprig.units import example, parse_quantity

MAX_RF_TONES = 3
#: The least SSB noise figure of a double-balanced mixer: the image band converts with the
#: signal's gain, so F_SSB = 2·F_DSB ≥ 2 (standard result, field notes: SSB = DSB + 3.01 dB).
SSB_NOISE_FIGURE_FLOOR_DB = 10.0 * math.log10(2.0)
_CACHE_LIMIT = 256
_TABLE_LIMIT = 64  # about 80 kB each for the demo part
#: Line tables and common-mode layouts of the one-point path kept per part (a line table is
#: about 90 kB for the demo part with two tones, 0.6 MB with three; a power sweep needs one)
_POINT_TABLE_LIMIT = 16
_AMP_BUCKET_DB = 1.0

Conversion = Literal["down", "up"]


# --- file model --------------------------------------------------------------------------
def _semantic(what: str, fix: str) -> PydanticCustomError:
    return PydanticCustomError("semantic", "{what}", {"what": what, "fix": fix})


_UNIT_NAME = {
    "frequency": "Hz", "power": "dBm", "level_db": "dB", "voltage": "V", "current": "A",
    "temperature": "degC", "resistance": "ohm",
}


def _quantity(kind: str, *, above: float | None = None, at_least: float | None = None) -> Any:
    """A float parsed from a number or a "value unit" string of ``kind``, with a bound."""
    unit = _UNIT_NAME[kind]

    def parse(value: Any) -> float:
        try:
            number = parse_quantity(value, kind)
        except UnitError as exc:
            raise PydanticCustomError(
                "quantity", "{what}", {"what": exc.what, "fix": exc.fix or ""}
            ) from None
        if above is not None and not number > above:
            raise _semantic(f"{value!r} must be more than {above:g} {unit}",
                            f"write a value above {above:g} {unit}, e.g. {example(kind)}")
        if at_least is not None and not number >= at_least:
            raise _semantic(f"{value!r} must be at least {at_least:g} {unit}",
                            f"write a value of {at_least:g} {unit} or more")
        return number

    return Annotated[float, BeforeValidator(parse)]


def _number(description: str) -> Any:
    """A plain number (int or float, not a string or a boolean)."""

    def parse(value: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise _semantic(f"{value!r} is not a number", f"write a plain number ({description})")
        if not math.isfinite(value):
            raise _semantic(f"{value!r} is not a finite number", "write a finite number")
        return float(value)

    return Annotated[float, BeforeValidator(parse)]


def _whole(low: int, high: int) -> Any:
    """A whole number in [low, high], written as a TOML integer."""

    def parse(value: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, int):
            raise _semantic(f"{value!r} is not a whole number",
                            f"write a whole number such as {low}")
        if not low <= value <= high:
            raise _semantic(f"{value} is out of range",
                            f"write a whole number from {low} to {high}")
        return value

    return Annotated[int, BeforeValidator(parse)]


class _Table(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, populate_by_name=True)


class PartTable(_Table):
    name: str = Field(min_length=1, description="part number or name")
    description: str = ""
    conversion: Conversion = "down"


class CoreTable(_Table):
    tail_current: _quantity("current", above=0.0)
    emitter_degeneration: _quantity("resistance", at_least=0.0) = 0.0
    cells: _whole(1, 16) = 1
    bias: Literal["constant", "ptat"] = "constant"
    reference_temperature: _quantity("temperature", above=-273.15) = 25.0
    nominal_supply: _quantity("voltage", above=0.0) = 3.3
    min_supply: _quantity("voltage", at_least=0.0) = 0.0
    tail_supply_coeff: _number("per volt") = 0.0
    aux_current: _quantity("current", at_least=0.0) = 0.0
    aux_supply_coeff: _number("per volt") = 0.0
    cm_second_order: _number("common-mode second-order coefficient") = 0.0


class MismatchTable(_Table):
    quad_offset_1: _quantity("voltage") = 0.0
    quad_offset_2: _quantity("voltage") = 0.0
    rf_pair_offset: _quantity("voltage") = 0.0
    load: _number("load mismatch ΔR/R, e.g. 0.02") = 0.0


class PortTable(_Table):
    resistance: _quantity("resistance", above=0.0)
    return_loss: _quantity("level_db", above=0.0) | None = None
    highpass: _quantity("frequency", above=0.0) | None = None
    lowpass: _quantity("frequency", above=0.0) | None = None

    @model_validator(mode="after")
    def _corners(self) -> PortTable:
        if self.highpass is not None and self.lowpass is not None and self.highpass >= self.lowpass:
            raise _semantic(
                f"highpass ({self.highpass:g} Hz) is not below lowpass ({self.lowpass:g} Hz)",
                "the pass band runs from highpass up to lowpass; swap or correct them",
            )
        return self


class PortsTable(_Table):
    rf: PortTable
    lo: PortTable
    if_: PortTable = Field(alias="if")


class IsolationTable(_Table):
    lo_to_rf: _quantity("level_db", at_least=0.0) | None = None
    lo_to_if: _quantity("level_db", at_least=0.0) | None = None
    rf_to_if: _quantity("level_db", at_least=0.0) | None = None
    rf_to_lo: _quantity("level_db", at_least=0.0) | None = None
    reference_frequency: _quantity("frequency", above=0.0) = 1e9
    lo_to_rf_slope: _number("dB per octave") = 0.0
    lo_to_if_slope: _number("dB per octave") = 0.0
    rf_to_if_slope: _number("dB per octave") = 0.0
    rf_to_lo_slope: _number("dB per octave") = 0.0


class NoiseTable(_Table):
    figure: _quantity("level_db", at_least=0.0)

    @model_validator(mode="after")
    def _physical(self) -> NoiseTable:
        if self.figure < SSB_NOISE_FIGURE_FLOOR_DB:
            raise _semantic(
                f"noise figure {self.figure:g} dB is below {SSB_NOISE_FIGURE_FLOOR_DB:.2f} dB: "
                "a double-balanced mixer converts the image band's noise with the signal's "
                "gain, so its single-sideband figure is at least 3.01 dB (SSB = DSB + 3.01 dB)",
                "write the single-sideband noise figure, 3.01 dB or more")
        return self
    figure_tempco: _number("dB per degC") = 0.0
    lo_nominal: _quantity("power") | None = None
    switch_share: Annotated[_number("a fraction from 0 to 1"), Field(ge=0.0, le=1.0)] = 0.3


class ModelTable(_Table):
    max_lo_order: _whole(1, 64) = 9
    max_rf_order: _whole(1, 25) = 9
    floor: _quantity("power") = -180.0


class PartFile(_Table):
    """The whole part file (see the module docstring for every key)."""

    part: PartTable
    core: CoreTable
    mismatch: MismatchTable = MismatchTable()
    ports: PortsTable
    isolation: IsolationTable = IsolationTable()
    noise: NoiseTable
    model: ModelTable = ModelTable()


# --- the part ----------------------------------------------------------------------------
@dataclass(frozen=True)
class PortNetwork:
    """One port: resistance at the core (ohm), return loss (dB, None = matched), corners (Hz)."""

    resistance_ohm: float
    return_loss_db: float | None = None
    highpass_hz: float | None = None
    lowpass_hz: float | None = None

    @property
    def gamma(self) -> float:
        """|Γ| of the port."""
        return reflection_magnitude(self.return_loss_db)

    @property
    def delivered_fraction(self) -> float:
        """1 − |Γ|²."""
        return 1.0 - self.gamma**2

    def magnitude(self, freq_hz: Any) -> Any:
        """|H(f)| of the port's band edges."""
        return band_magnitude(freq_hz, self.highpass_hz, self.lowpass_hz)

    def scalar_magnitude(self, freq_hz: float) -> float:
        """|H(f)| for one frequency (plain float arithmetic)."""
        mag = 1.0
        if self.highpass_hz is not None:
            r = freq_hz / self.highpass_hz
            mag *= r / math.sqrt(1.0 + r * r)
        if self.lowpass_hz is not None:
            r = freq_hz / self.lowpass_hz
            mag /= math.sqrt(1.0 + r * r)
        return mag

    def scalar_magnitudes(self, freq_hz: np.ndarray) -> np.ndarray:
        """:meth:`scalar_magnitude` of each frequency (Hz): the same float operations,
        element by element, so a sweep's amplitudes are bit for bit the one-point path's."""
        mag = np.ones(freq_hz.shape)
        if self.highpass_hz is not None:
            r = freq_hz / self.highpass_hz
            mag *= r / np.sqrt(1.0 + r * r)
        if self.lowpass_hz is not None:
            r = freq_hz / self.lowpass_hz
            mag /= np.sqrt(1.0 + r * r)
        return mag


@dataclass(frozen=True)
class _LoPrepared:
    factor: LoFactor
    gain_db: float  # mid-band small-signal conversion gain, dB
    noise_dbm_per_hz: float  # output noise density
    noise_figure_db: float  # SSB noise figure at this LO drive
    d0: float  # DC of the quad's D = t1 − t2 (its imbalance from the pair offsets)


@dataclass(frozen=True)
class PortLines:
    """Lines at each port as complex amplitudes, sqrt(W) into 50 ohm (``|a|²·1e3`` mW).

    ``output``: the output port (IF of a downconverter); ``input``: the transconductor input
    port; ``lo``: the LO port. ``noise_dbm_per_hz``: output noise density.
    """

    output: Lines
    input: Lines
    lo: Lines
    noise_dbm_per_hz: float
    notes: dict[str, float]


class _Evaluation(NamedTuple):
    output: Lines  # orders as codes into ``names``
    names: Any  # object array of order tuples
    #: (LO, tones, axes) of the input and LO ports' leakage lines (made when asked for,
    #: :meth:`MixerPart._input_entries`, :meth:`MixerPart._lo_entries`); None: no leakage
    leaking: tuple[Any, ...] | None
    noise_dbm_per_hz: float
    supply_current_a: float
    notes: dict[str, float]


@dataclass(frozen=True)
class _OpState:
    cell: CellState
    gm_s: float  # small-signal transconductance at the RF pair's offset, S
    noise_figure_db: float
    supply_current_a: float
    min_abs_a: float  # core line amplitude below which a line cannot reach the floor
    out_scale: float  # sqrt(R_L/2·(1 − |Γ_out|²)): peak current → sqrt(W)
    no_rf: RfFactor  # the transconductor factor with no input tones
    prefloor_w: float  # 20 dB under the floor, W


@dataclass(frozen=True)
class MixerPart:
    """A double-balanced Gilbert-cell mixer (behavioural, memoryless core between port
    networks). Build it with :func:`load_part`; all values are SI (see field names).

    Ports are named physically (``rf_port``, ``lo_port``, ``if_port``); ``conversion``
    decides which of RF and IF feeds the transconductor (``input_port``) and which is the
    output (``output_port``).
    """

    name: str
    conversion: Conversion
    tail_current_a: float
    rf_port: PortNetwork
    lo_port: PortNetwork
    if_port: PortNetwork
    noise_figure_db: float
    description: str = ""
    emitter_degeneration_ohm: float = 0.0
    cells: int = 1
    bias: Literal["constant", "ptat"] = "constant"
    reference_temperature_c: float = 25.0
    nominal_supply_v: float = 3.3
    min_supply_v: float = 0.0
    tail_supply_coeff_per_v: float = 0.0
    aux_current_a: float = 0.0
    aux_supply_coeff_per_v: float = 0.0
    quad_offset_1_v: float = 0.0
    quad_offset_2_v: float = 0.0
    rf_pair_offset_v: float = 0.0
    isolation_lo_rf_db: float | None = None
    isolation_lo_if_db: float | None = None
    isolation_rf_if_db: float | None = None
    isolation_rf_lo_db: float | None = None
    isolation_reference_hz: float = 1e9
    isolation_lo_rf_slope_db_per_octave: float = 0.0
    isolation_lo_if_slope_db_per_octave: float = 0.0
    isolation_rf_if_slope_db_per_octave: float = 0.0
    isolation_rf_lo_slope_db_per_octave: float = 0.0
    noise_figure_tempco_db_per_c: float = 0.0
    cm_second_order: float = 0.0
    load_mismatch: float = 0.0
    noise_lo_nominal_dbm: float | None = None
    noise_switch_share: float = 0.3
    leakage_phases: LeakagePhases = field(default_factory=LeakagePhases)
    max_lo_order: int = 9
    max_rf_order: int = 9
    floor_dbm: float = -180.0
    source: str = ""
    _cache: dict[Any, Any] = field(
        default_factory=dict, init=False, repr=False, compare=False, hash=False
    )
    #: Sorted line-frequency tables of the sweep path (see sweep._combine), by LO
    #: frequency, tone frequencies and LO orders: the points of a power sweep share one.
    _tables: dict[Any, Any] = field(
        default_factory=dict, init=False, repr=False, compare=False, hash=False
    )
    #: The one-point path's line tables and common-mode layouts, by LO and tone
    #: frequencies (see :meth:`_line_table`): the points of a power sweep share them.
    _point_tables: dict[Any, Any] = field(
        default_factory=dict, init=False, repr=False, compare=False, hash=False
    )

    def __post_init__(self) -> None:
        where = f"mixer part {self.name!r}"
        problems = []
        if self.conversion not in ("down", "up"):
            problems.append(f"conversion {self.conversion!r} is not 'down' or 'up'")
        if self.bias not in ("constant", "ptat"):
            problems.append(f"bias {self.bias!r} is not 'constant' or 'ptat'")
        if not self.tail_current_a > 0.0:
            problems.append(f"tail current {self.tail_current_a!r} A is not positive")
        if not self.emitter_degeneration_ohm >= 0.0:
            problems.append(
                f"emitter degeneration {self.emitter_degeneration_ohm!r} ohm is negative")
        for label, port in (("rf", self.rf_port), ("lo", self.lo_port), ("if", self.if_port)):
            if not port.resistance_ohm > 0.0:
                problems.append(
                    f"{label} port resistance {port.resistance_ohm!r} ohm is not positive")
        if not (1 <= self.max_lo_order <= 64 and 1 <= self.max_rf_order <= 25):
            problems.append("product order caps are outside 1..64 (LO) and 1..25 (RF)")
        if problems:
            raise InputError("; ".join(problems), where=where,
                             fix="correct the part's parameters (see the part-file schema)")

    # -- roles -----------------------------------------------------------------------------
    @property
    def input_port(self) -> PortNetwork:
        """The port feeding the transconductor (RF for a downconverter, IF for an up)."""
        return self.rf_port if self.conversion == "down" else self.if_port

    @property
    def output_port(self) -> PortNetwork:
        """The output port (IF for a downconverter, RF for an upconverter)."""
        return self.if_port if self.conversion == "down" else self.rf_port

    @property
    def isolation_lo_to_output_db(self) -> float | None:
        return self.isolation_lo_if_db if self.conversion == "down" else self.isolation_lo_rf_db

    @property
    def isolation_lo_to_input_db(self) -> float | None:
        return self.isolation_lo_rf_db if self.conversion == "down" else self.isolation_lo_if_db

    def _iso_slope(self, path: str) -> tuple[float, float]:
        """(dB per octave, reference Hz) of a leakage path (``"lo_rf"``, ``"lo_if"``, …)."""
        return (getattr(self, f"isolation_{path}_slope_db_per_octave"),
                self.isolation_reference_hz)

    def with_changes(self, **changes: Any) -> MixerPart:
        """A copy with some parameters changed (fresh caches)."""
        return replace(self, **changes)

    # -- operating point -------------------------------------------------------------------
    def tail_current_at(self, op: OperatingPoint) -> float:
        """I_EE at an operating point, A."""
        return tail_current_a(
            self.tail_current_a, self.bias, op.temperature_c, self.reference_temperature_c,
            op.supply_v, self.nominal_supply_v, self.tail_supply_coeff_per_v, self.min_supply_v,
        )

    def cell_at(self, op: OperatingPoint) -> CellState:
        """The core's state (VT, I_EE, R_E, offsets) at an operating point."""
        return CellState(
            vt_v=thermal_voltage_v(op.temperature_c),
            i_ee_a=self.tail_current_at(op),
            r_e_ohm=self.emitter_degeneration_ohm,
            v_os1_v=self.quad_offset_1_v,
            v_os2_v=self.quad_offset_2_v,
            v_os_rf_v=self.rf_pair_offset_v,
        )

    def supply_current_at(self, op: OperatingPoint) -> float:
        """I_supply = cells·I_EE + I_aux(V), A (0 with no supply)."""
        if op.supply_v <= 0.0:
            return 0.0
        aux = self.aux_current_a * (
            1.0 + self.aux_supply_coeff_per_v * (op.supply_v - self.nominal_supply_v)
        )
        return self.cells * self.tail_current_at(op) + max(aux, 0.0)

    def noise_figure_at(self, op: OperatingPoint) -> float:
        """SSB noise figure at the die temperature, dB."""
        return self.noise_figure_db + self.noise_figure_tempco_db_per_c * (
            op.temperature_c - self.reference_temperature_c
        )

    def _state(self, op: OperatingPoint) -> _OpState:
        key = ("op", op)
        state = self._cache.get(key)
        if state is None:
            cell = self.cell_at(op)
            slope = float(pair_slope_per_v(cell.v_os_rf_v, cell.vt_v, cell.i_ee_a, cell.r_e_ohm))
            out = self.output_port
            out_scale = math.sqrt(out.resistance_ohm / 2.0 * out.delivered_fraction)
            floor_w = 1e-3 * 10.0 ** ((self.floor_dbm - 20.0) / 10.0)
            state = _OpState(
                cell=cell,
                gm_s=cell.i_ee_a * slope,
                noise_figure_db=self.noise_figure_at(op),
                supply_current_a=self.supply_current_at(op),
                min_abs_a=math.sqrt(floor_w) / out_scale if out_scale > 0 else math.inf,
                out_scale=out_scale,
                no_rf=rf_factor((), cell, self.max_rf_order),
                prefloor_w=floor_w,
            )
            self._remember(key, state)
        return state

    def _remember_table(self, key: Any, value: Any) -> None:
        if len(self._tables) >= _TABLE_LIMIT:
            del self._tables[next(iter(self._tables))]  # the oldest
        self._tables[key] = value

    def _remember_point_table(self, key: Any, value: Any) -> None:
        if len(self._point_tables) >= _POINT_TABLE_LIMIT:
            del self._point_tables[next(iter(self._point_tables))]  # the oldest
        self._point_tables[key] = value

    def _remember(self, key: Any, value: Any) -> None:
        if len(self._cache) >= _CACHE_LIMIT:
            self._cache.clear()
        self._cache[key] = value

    # -- inputs at the core ----------------------------------------------------------------
    @staticmethod
    def tone_core_amplitudes(tone: ToneInput, port: PortNetwork) -> tuple[float, ...]:
        """Peak differential voltages at the core of a tone and its harmonics, V.

        ``v = sqrt(2·R·P_avail·(1 − |Γ|²))·|H(h·f)|`` for harmonic h.
        """
        factor = 2.0 * port.resistance_ohm * port.delivered_fraction * 1e-3
        amps = [math.sqrt(factor * 10.0 ** (tone.power_dbm / 10.0))
                * port.scalar_magnitude(tone.freq_hz)]
        for h, dbc in enumerate(tone.harmonics_dbc, start=2):
            amps.append(math.sqrt(factor * 10.0 ** ((tone.power_dbm + dbc) / 10.0))
                        * port.scalar_magnitude(h * tone.freq_hz))
        return tuple(amps)

    def _rf_shape(
        self, op: OperatingPoint, amps: tuple[tuple[float, ...], ...], cell: CellState
    ) -> tuple[tuple[int, ...], bool]:
        bucket = tuple(tuple(_bucket_up(a) for a in tone) for tone in amps)
        key = ("grid", op, bucket)
        shape = self._cache.get(key)
        if shape is None:
            shape = rf_grid_shape(bucket, cell, self.max_rf_order)
            self._remember(key, shape)
        return shape

    # -- evaluation ------------------------------------------------------------------------
    def evaluate(
        self, op: OperatingPoint, lo: ToneInput | None, rf: Sequence[ToneInput]
    ) -> MixerResponse:
        """The part's response to an LO (or none) and up to three tones at the transconductor
        input port (the RF port of a downconverter, the IF port of an upconverter).

        Output lines carry orders (LO, IN1, IN2, …). Lines below the part's floor are left
        out; lines at the same frequency are added as complex amplitudes.
        """
        return self._response(self._evaluate(op, lo, tuple(rf), leakage=True))

    def evaluate_many(
        self, op: OperatingPoint, lo: ToneInput | None,
        tone_sets: Sequence[Sequence[ToneInput]],
    ) -> list[MixerResponse]:
        """:meth:`evaluate` for the points of a sweep (one LO and operating point, the
        input tones changing from point to point), in their order.

        Points with the same number of tones and the same source harmonics go through the
        vectorised path together (:func:`~sweeprig.sim.mixer.sweep.evaluate_group`: their
        transconductor factors solved per grid shape, and the combination, merge, leakage
        and floor on the lines of all of them at once); the others, a point with no tone
        and a part whose bias is off go through :meth:`evaluate`. Every response equals
        the one :meth:`evaluate` gives for that point alone, within rounding."""
        sets = [tuple(tones) for tones in tone_sets]
        if not _all_sets_valid(lo, sets):
            for tones in sets:
                self._check_inputs(lo, tones)
        state = self._state(op)
        out: list[MixerResponse | None] = [None] * len(sets)
        if state.cell.i_ee_a > 0.0:
            groups: dict[tuple[tuple[float, ...], ...], list[int]] = {}
            for i, tones in enumerate(sets):
                if tones:  # the group's sweep_signature
                    groups.setdefault(tuple([t.harmonics_dbc for t in tones]), []).append(i)
            for members in groups.values():
                for i, response in zip(members, evaluate_group(
                        self, op, lo, state, [sets[i] for i in members]), strict=True):
                    out[i] = response
        return [response if response is not None
                else self._response(self._evaluate(op, lo, sets[i], leakage=True))
                for i, response in enumerate(out)]

    def _response(self, ev: _Evaluation) -> MixerResponse:
        return MixerResponse(
            if_port=self._levels(ev.output, ev.names),
            # the input and LO ports' few lines are made when read (the bench reads them
            # only with its switch on those ports)
            rf_port=() if ev.leaking is None else DeferredPort(
                (self._port_products, self._input_entries, *ev.leaking)),
            lo_port=() if ev.leaking is None else DeferredPort(
                (self._port_products, self._lo_entries, *ev.leaking)),
            if_noise_dbm_per_hz=ev.noise_dbm_per_hz,
            supply_current_a=ev.supply_current_a,
            notes=ev.notes,
        )

    def evaluate_lines(
        self, op: OperatingPoint, lo: ToneInput | None, rf: Sequence[ToneInput],
        *, leakage: bool = True,
    ) -> PortLines:
        """Every line at each port as a complex amplitude (sqrt(W) into 50 ohm, phases in
        radians), merged by frequency, no floor applied; ``leakage=False`` leaves out the
        linear paths (isolation and port reflections), so the rest is what the core makes.
        The complex amplitudes of two evaluations can be subtracted to split lines by
        origin (see :mod:`sweeprig.sim.truth`)."""
        ev = self._evaluate(op, lo, tuple(rf), leakage=leakage)
        in_entries = [] if ev.leaking is None else self._input_entries(*ev.leaking)
        lo_entries = [] if ev.leaking is None else self._lo_entries(*ev.leaking)
        return PortLines(
            output=Lines(ev.output.freq_hz, ev.output.amp, ev.names[ev.output.orders]),
            input=merge_coincident(_entries_to_lines(in_entries, 1 + len(tuple(rf)))),
            lo=merge_coincident(_entries_to_lines(lo_entries, 1 + len(tuple(rf)))),
            noise_dbm_per_hz=ev.noise_dbm_per_hz,
            notes=ev.notes,
        )

    def _evaluate(
        self, op: OperatingPoint, lo: ToneInput | None, tones: tuple[ToneInput, ...],
        *, leakage: bool,
    ) -> _Evaluation:
        self._check_inputs(lo, tones)
        state = self._state(op)
        cell = state.cell
        lo_prep = self._lo_prepared(op, lo, state)
        inp, out = self.input_port, self.output_port
        if tones:
            amps = tuple(self.tone_core_amplitudes(t, inp) for t in tones)
            shape, converged = self._rf_shape(op, amps, cell)
            rf_fac = rf_factor(amps, cell, self.max_rf_order, shape)
        else:
            amps = ()
            shape, converged, rf_fac = (), True, state.no_rf
        lo_freq = lo.freq_hz if lo is not None else 0.0
        tone_freqs = tuple([t.freq_hz for t in tones])
        table = self._line_table(lo_prep.factor, lo_freq, rf_fac, tone_freqs)
        counts = tuple([len(a) for a in amps])  # lines per tone: fundamental, harmonics
        names, cm_offset, code_of = _output_names(
            self.max_lo_order, self.max_rf_order, counts,
            0 if lo is None else 1 + len(lo.harmonics_dbc))
        core, entries = combine_on(
            table, lo_prep.factor, lo.phase_rad if lo is not None else 0.0, rf_fac,
            [t.phase_rad for t in tones], cell.i_ee_a, self.max_lo_order, self.max_rf_order,
            state.min_abs_a, coded=True,
        )
        n_axes = 1 + len(tones)
        amp = core.amp * state.out_scale
        if out.highpass_hz is not None or out.lowpass_hz is not None:
            # the port's magnitude at each line: from the table's, when it serves a second
            # point (made once for all its entries), else at these lines
            amp *= (table.gain(out.magnitude)[entries] if table.uses > 1
                    else out.magnitude(core.freq_hz))
            # the band edges push many weak lines under the floor: drop them before merging
            # (20 dB of margin for lines that might still add up)
            keep = ((amp.real * amp.real + amp.imag * amp.imag)
                    >= state.prefloor_w).nonzero()[0]
            core = Lines(core.freq_hz[keep], amp[keep], core.orders[keep])
        else:
            core = Lines(core.freq_hz, amp, core.orders)
        core = merge_coincident(core)
        imbalance = self.load_mismatch + lo_prep.d0
        if tones and self.cm_second_order and imbalance:
            layout, gain = self._common_mode_layout(tone_freqs, amps, n_axes)
            cm_amp = common_mode_im2_amplitudes(
                layout, np.array([v for a in amps for v in a]),
                np.array([h * t.phase_rad for t, a in zip(tones, amps, strict=True)
                          for h in range(1, len(a) + 1)]),
                cell.i_ee_a, 2.0 * cell.vt_v + cell.i_ee_a * cell.r_e_ohm,
                self.cm_second_order, imbalance,
            )
            if cm_amp is not None:
                cm_amp = cm_amp * state.out_scale
                if gain is not None:
                    cm_amp = cm_amp * gain
                core = add_lines(core, Lines(layout.freq_hz, cm_amp, layout.codes + cm_offset))
        if leakage:
            phases = self.leakage_phases
            leaks: list[_Entry] = []
            iso = self.isolation_rf_if_db
            if iso is not None:
                for k, t in enumerate(tones):
                    leaks += _tone_entries(t, 1 + k, n_axes, iso, phases.rf_to_if,
                                           self._iso_slope("rf_if"))
            iso = self.isolation_lo_to_output_db
            if lo is not None and iso is not None:
                path = phases.lo_to_if if self.conversion == "down" else phases.lo_to_rf
                leaks += _tone_entries(lo, 0, n_axes, iso, path, self._iso_slope(
                    "lo_if" if self.conversion == "down" else "lo_rf"))
            if leaks:
                core = _add_entries(core, leaks, code_of)
        return _Evaluation(
            output=core,
            names=names,
            leaking=(lo, tones, n_axes) if leakage else None,
            noise_dbm_per_hz=lo_prep.noise_dbm_per_hz,
            supply_current_a=state.supply_current_a,
            notes={
                "vt_v": cell.vt_v,
                "tail_current_a": cell.i_ee_a,
                "gm_s": state.gm_s,
                "conversion_gain_db": lo_prep.gain_db,
                "noise_figure_db": lo_prep.noise_figure_db,
                "lo_grid_n": float(lo_prep.factor.grid_n),
                "rf_grid_points": float(math.prod(shape)),
                "rf_grid_n_max": float(max(shape, default=1)),
                "grid_converged": float(converged and lo_prep.factor.converged),
            },
        )

    def _input_entries(self, lo: ToneInput | None, tones: tuple[ToneInput, ...],
                       n_axes: int) -> list[_Entry]:
        """The linear lines leaving the transconductor input port: the LO leaking to it
        and the tones' reflections."""
        phases, inp = self.leakage_phases, self.input_port
        entries: list[_Entry] = []
        iso = self.isolation_lo_to_input_db
        if lo is not None and iso is not None:
            path = phases.lo_to_rf if self.conversion == "down" else phases.lo_to_if
            entries += _tone_entries(lo, 0, n_axes, iso, path, self._iso_slope(
                "lo_rf" if self.conversion == "down" else "lo_if"))
        if inp.return_loss_db is not None:
            for k, t in enumerate(tones):
                entries += _tone_entries(t, 1 + k, n_axes, inp.return_loss_db,
                                         phases.input_reflection)
        return entries

    def _lo_entries(self, lo: ToneInput | None, tones: tuple[ToneInput, ...],
                    n_axes: int) -> list[_Entry]:
        """The linear lines leaving the LO port: its reflection and the tones leaking to
        it."""
        phases = self.leakage_phases
        entries: list[_Entry] = []
        if lo is not None and self.lo_port.return_loss_db is not None:
            entries += _tone_entries(lo, 0, n_axes, self.lo_port.return_loss_db,
                                     phases.lo_reflection)
        iso = self.isolation_rf_lo_db
        if iso is not None:
            for k, t in enumerate(tones):
                entries += _tone_entries(t, 1 + k, n_axes, iso, phases.rf_to_lo,
                                         self._iso_slope("rf_lo"))
        return entries

    def _port_products(self, entries_of: Callable[..., list[_Entry]], lo: ToneInput | None,
                       tones: tuple[ToneInput, ...], n_axes: int) -> tuple[Product, ...]:
        """A port's linear lines (``entries_of``: :meth:`_input_entries` or
        :meth:`_lo_entries`) as products above the floor."""
        return _entries_to_products(entries_of(lo, tones, n_axes), self.floor_dbm)

    def _line_table(self, lo_fac: LoFactor, lo_freq_hz: float, rf_fac: RfFactor,
                    tone_freqs: tuple[float, ...]) -> LineTable:
        """The :class:`LineTable` of an LO and tone frequencies, kept for the points of a
        power sweep, which share it."""
        key = ("one-point", lo_freq_hz, tone_freqs, lo_fac.orders.tobytes(),
               self.max_rf_order)
        table = self._point_tables.get(key)
        if table is None:
            table = LineTable(lo_fac.orders, lo_freq_hz, rf_fac.orders, tone_freqs)
            self._remember_point_table(key, table)
        return table

    def _common_mode_layout(
        self, tone_freqs: tuple[float, ...], amps: tuple[tuple[float, ...], ...], n_axes: int
    ) -> tuple[CommonModeLayout, Any]:
        """The common-mode lines' :class:`CommonModeLayout` for tones at ``tone_freqs``
        with the harmonics of ``amps``, and the output port's band-edge magnitude at each
        (None: no band edges); kept for the points of a power sweep, which share them."""
        counts = tuple([len(a) for a in amps])
        key = ("common-mode", tone_freqs, counts)
        kept = self._point_tables.get(key)
        if kept is None:
            layout = CommonModeLayout(
                np.array([h * f for f, count in zip(tone_freqs, counts, strict=True)
                          for h in range(1, count + 1)]), counts, n_axes)
            out = self.output_port
            banded = out.highpass_hz is not None or out.lowpass_hz is not None
            kept = (layout, out.magnitude(layout.freq_hz) if banded else None)
            self._remember_point_table(key, kept)
        return kept

    def _lo_prepared(
        self, op: OperatingPoint, lo: ToneInput | None, state: _OpState
    ) -> _LoPrepared:
        """The LO factor, small-signal gain and noise for an LO tone, cached per (LO, op)."""
        key = ("lo", op, None if lo is None else (lo.freq_hz, lo.power_dbm, lo.harmonics_dbc))
        prep = self._cache.get(key)
        if prep is None:
            amps = () if lo is None else self.tone_core_amplitudes(lo, self.lo_port)
            factor = self._lo_factor(amps, state.cell)
            gain_db = self._small_signal_gain_db(state, factor)
            nf_db = state.noise_figure_db
            if lo is not None and self.noise_lo_nominal_dbm is not None:
                nf_db = self._lo_drive_noise_figure_db(op, lo, amps[0], gain_db, state)
            noise = max(KT0_DBM_PER_HZ + nf_db + gain_db, KT0_DBM_PER_HZ)
            zero = np.flatnonzero(factor.orders == 0)
            d0 = float(factor.d[zero[0]].real) if zero.size else 0.0
            prep = _LoPrepared(factor, gain_db, noise, nf_db, d0)
            self._remember(key, prep)
        return prep

    def _lo_factor(self, amps: tuple[float, ...], cell: CellState) -> LoFactor:
        """:func:`lo_factor` for LO amplitudes at the quad, V: the grid that converged for
        the last drive in the same 1 dB bucket is the guess (it changes the cost, never the
        result; an LO stepped in frequency moves its amplitude through the port's band edges
        by a fraction of a dB, so the guess is nearly always right)."""
        key = ("lo-grid", cell, tuple(_bucket_up(a) for a in amps))
        factor = lo_factor(amps, cell, self.max_lo_order, grid_guess=self._cache.get(key))
        if factor.grid_n > 1:
            self._remember(key, factor.grid_n)
        return factor

    def _lo_drive_noise_figure_db(
        self, op: OperatingPoint, lo: ToneInput, amp_v: float, gain_db: float, state: _OpState
    ) -> float:
        """Noise figure at this LO drive (``noise.lo_nominal`` holds ``noise.figure``)."""
        assert self.noise_lo_nominal_dbm is not None
        key = ("lo-nominal", op, lo.freq_hz)
        nominal = self._cache.get(key)
        if nominal is None:
            nom_amps = self.tone_core_amplitudes(
                ToneInput(lo.freq_hz, self.noise_lo_nominal_dbm), self.lo_port)
            nom_gain = self._small_signal_gain_db(state, self._lo_factor(nom_amps, state.cell))
            nominal = (switch_overlap_fraction(nom_amps[0], state.cell.vt_v), nom_gain)
            self._remember(key, nominal)
        nom_overlap, nom_gain_db = nominal
        factor = lo_drive_noise_factor(
            10.0 ** (state.noise_figure_db / 10.0), self.noise_switch_share,
            switch_overlap_fraction(amp_v, state.cell.vt_v), nom_overlap,
            10.0 ** ((gain_db - nom_gain_db) / 10.0),
        )
        return 10.0 * math.log10(factor) if math.isfinite(factor) else 300.0

    def _small_signal_gain_db(self, state: _OpState, lo_fac: LoFactor) -> float:
        """Mid-band small-signal transducer conversion gain (no band edges), dB.

        Voltage gain ``G_m·R_L·|S_1|/2`` (S_1: first Fourier coefficient of t1 + t2), then
        ``G = g_v²·R_in/R_L·(1 − |Γ_in|²)·(1 − |Γ_out|²)``.
        """
        hit = np.flatnonzero(lo_fac.orders == 1)
        s1 = abs(complex(lo_fac.s[hit[0]])) if hit.size else 0.0
        inp, out = self.input_port, self.output_port
        g_v = state.gm_s * out.resistance_ohm * s1 / 2.0
        gain = (g_v**2 * inp.resistance_ohm / out.resistance_ohm
                * inp.delivered_fraction * out.delivered_fraction)
        return 10.0 * math.log10(gain) if gain > 0.0 else -math.inf

    def _levels(self, lines: Lines, names: Any) -> PortLevels:
        """Merged lines (sqrt(W) amplitudes, orders as codes into ``names``) → the port's
        lines above the floor, as arrays (the order tuples made when first read)."""
        power_w = lines.amp.real**2 + lines.amp.imag**2
        keep = power_w >= 1e-3 * 10.0 ** (self.floor_dbm / 10.0)
        if keep.all():
            return PortLevels.coded(lines.freq_hz, 10.0 * np.log10(power_w * 1e3),
                                    lines.orders, names)
        kept = keep.nonzero()[0]
        return PortLevels.coded(lines.freq_hz[kept], 10.0 * np.log10(power_w[kept] * 1e3),
                                lines.orders[kept], names)

    def _check_inputs(self, lo: ToneInput | None, tones: tuple[ToneInput, ...]) -> None:
        if len(tones) <= MAX_RF_TONES and _all_valid(lo, tones):
            return
        if len(tones) > MAX_RF_TONES:
            raise InputError(
                f"{len(tones)} input tones; the model takes at most {MAX_RF_TONES}",
                where=f"mixer part {self.name!r}",
                fix="combine fewer tones (one phase axis per tone)",
            )
        named = [(f"input tone {k + 1}", t) for k, t in enumerate(tones)]
        if lo is not None:
            named.append(("LO", lo))
        for label, tone in named:
            ok = (
                math.isfinite(tone.freq_hz) and tone.freq_hz > 0.0
                and math.isfinite(tone.power_dbm) and math.isfinite(tone.phase_rad)
                and all(math.isfinite(h) for h in tone.harmonics_dbc)
            )
            if not ok:
                raise InputError(
                    f"{label} is not a valid tone ({tone.freq_hz!r} Hz, {tone.power_dbm!r} dBm)",
                    where=f"mixer part {self.name!r}",
                    fix="give a positive finite frequency and finite power, phase and harmonics",
                )


def _all_valid(lo: ToneInput | None, tones: tuple[ToneInput, ...]) -> bool:
    """Whether every tone is valid (the quick test of ``_check_inputs``): positive
    frequencies, and a finite sum of every number (an infinity or NaN anywhere makes the
    sum infinite or NaN; a sum that overflows sends the caller to the full check)."""
    total = 0.0
    for tone in tones if lo is None else (*tones, lo):
        if not tone.freq_hz > 0.0:
            return False
        total += tone.freq_hz + tone.power_dbm + tone.phase_rad + sum(tone.harmonics_dbc)
    return math.isfinite(total)


def _all_sets_valid(lo: ToneInput | None, sets: list[tuple[ToneInput, ...]]) -> bool:
    """Whether every point of a sweep passes ``_check_inputs`` (the quick test of
    :func:`_all_valid` over all of them at once: at most ``MAX_RF_TONES`` tones each,
    positive frequencies and a finite sum of every number; False sends the caller to the
    point-by-point check, which names the first bad point)."""
    total = 0.0
    if lo is not None:
        if not lo.freq_hz > 0.0:
            return False
        total += lo.freq_hz + lo.power_dbm + lo.phase_rad + sum(lo.harmonics_dbc)
    for tones in sets:
        if len(tones) > MAX_RF_TONES:
            return False
        for tone in tones:
            if not tone.freq_hz > 0.0:
                return False
            total += tone.freq_hz + tone.power_dbm + tone.phase_rad + sum(tone.harmonics_dbc)
    return math.isfinite(total)


def _bucket_up(amp_v: float) -> float:
    """Round an amplitude up to a 1 dB grid (grid sizes are cached per bucket)."""
    if amp_v <= 0.0:
        return 0.0
    step = math.ceil(20.0 * math.log10(amp_v) / _AMP_BUCKET_DB)
    return 10.0 ** (step * _AMP_BUCKET_DB / 20.0)


_Entry = tuple[float, complex, tuple[int, ...]]


@lru_cache(maxsize=64)
def _output_names(
    max_lo_order: int, max_rf_order: int, counts: tuple[int, ...], lo_multiples: int
) -> tuple[Any, int, dict[tuple[int, ...], int]]:
    """Every order tuple a line at the output port can carry, as one read-only object
    array that the lines' codes index, for tones with ``counts`` lines each (fundamental
    and harmonics) and an LO with ``lo_multiples``: the combination's
    (:func:`combo_tuples`, flat) first, then the common-mode lines'
    (:func:`common_mode_names`, from the offset returned), then the linear paths' (each
    tone's and the LO's multiples, with the code of each)."""
    n_axes = 1 + len(counts)
    parts = [combo_tuples(max_lo_order, len(counts), max_rf_order).ravel()]
    cm_offset = parts[0].size
    if counts:
        parts.append(common_mode_names(counts, n_axes))
    units = [_unit_orders(n_axes, 0, h) for h in range(1, lo_multiples + 1)]
    units += [_unit_orders(n_axes, 1 + k, h) for k, count in enumerate(counts)
              for h in range(1, count + 1)]
    start = sum(part.size for part in parts)
    tail = np.empty(len(units), dtype=object)
    tail[:] = units
    names = np.concatenate([*parts, tail])
    names.flags.writeable = False
    return names, cm_offset, {unit: start + i for i, unit in enumerate(units)}


@lru_cache(maxsize=256)
def _unit_orders(n_axes: int, axis: int, multiple: int) -> tuple[int, ...]:
    row = [0] * n_axes
    row[axis] = multiple
    return tuple(row)


def _tone_entries(
    tone: ToneInput, axis: int, n_axes: int, loss_db: float, path: LeakPhase | None = None,
    slope: tuple[float, float] = (0.0, 1.0),
) -> list[_Entry]:
    """A tone and its harmonics carried by a linear path with ``loss_db``: (freq, sqrt(W)
    amplitude with the tone's phase (harmonic h at phase h·φ) turned by the path's own
    phase at that frequency, orders). ``slope``: (dB per octave, reference Hz): the loss at
    f is ``loss_db + slope·log2(f/reference)`` (0: flat)."""
    if slope[0]:
        loss_db = loss_db + slope[0] * math.log2(tone.freq_hz / slope[1])
        harmonic_extra = [slope[0] * math.log2(h) for h in range(2, 2 + len(tone.harmonics_dbc))]
    else:
        harmonic_extra = [0.0] * len(tone.harmonics_dbc)
    root_w = 10.0 ** ((tone.power_dbm - loss_db - 30.0) / 20.0)  # sqrt(W) of the fundamental
    phase = tone.phase_rad
    turn = path is not None and (path.phase_rad or path.delay_s)
    first = cmath.rect(root_w, phase) if phase else complex(root_w)
    if turn:
        first *= path.rotation(tone.freq_hz)  # type: ignore[union-attr]
    out: list[_Entry] = [(tone.freq_hz, first, _unit_orders(n_axes, axis, 1))]
    for h, dbc in enumerate(tone.harmonics_dbc, start=2):
        amp = cmath.rect(root_w * 10.0 ** ((dbc - harmonic_extra[h - 2]) / 20.0), h * phase)
        if turn:
            amp *= path.rotation(h * tone.freq_hz)  # type: ignore[union-attr]
        out.append((h * tone.freq_hz, amp, _unit_orders(n_axes, axis, h)))
    return out


def _add_entries(lines: Lines, entries: list[_Entry], code_of: dict[tuple[int, ...], int]
                 ) -> Lines:
    """Add a few linear-path lines to sorted, merged lines (orders as codes; ``code_of``:
    the code of each entry's orders): an entry at the frequency of an existing line adds
    to it as a complex amplitude (the stronger names the orders); the others are
    inserted."""
    freq = lines.freq_hz
    amp = lines.amp.copy()
    orders = lines.orders
    copied = False  # the orders are copied when the first entry names a line
    where = freq.searchsorted([e[0] for e in entries]).tolist()
    extra: list[_Entry] = []
    for (f, a, o), i in zip(entries, where, strict=True):
        hit = -1
        if i < freq.size and abs(freq[i] - f) <= MERGE_TOL_HZ:
            hit = i
        elif i > 0 and abs(freq[i - 1] - f) <= MERGE_TOL_HZ:
            hit = i - 1
        if hit < 0:
            extra.append((f, a, o))
            continue
        if abs(a) > abs(amp[hit]):
            if not copied:
                orders, copied = orders.copy(), True
            orders[hit] = code_of[o]
        amp[hit] += a
    merged = Lines(freq, amp, orders)
    if extra:
        merged = merge_coincident(concat_lines([merged, Lines(
            np.array([e[0] for e in extra]), np.array([e[1] for e in extra]),
            np.array([code_of[e[2]] for e in extra], dtype=np.intp))]))
    return merged


def _entries_to_lines(entries: list[_Entry], n_axes: int = 1) -> Lines:
    if not entries:
        return Lines(np.zeros(0), np.zeros(0, dtype=complex), np.empty(0, dtype=object))
    orders = np.empty(len(entries), dtype=object)
    orders[:] = [e[2] for e in entries]
    return Lines(np.array([e[0] for e in entries]), np.array([e[1] for e in entries]), orders)


def _entries_to_products(entries: list[_Entry], floor_dbm: float) -> tuple[Product, ...]:
    """A few linear-path lines → products: same frequencies add as complex amplitudes (the
    strongest contributor names the orders), sorted by frequency, floor applied."""
    if not entries:
        return ()
    entries = sorted(entries, key=_entry_freq)
    groups: list[list[_Entry]] = [[entries[0]]]
    for entry in entries[1:]:
        if entry[0] - groups[-1][0][0] <= MERGE_TOL_HZ:
            groups[-1].append(entry)
        else:
            groups.append([entry])
    floor_w = 10.0 ** ((floor_dbm - 30.0) / 10.0)
    out = []
    for members in groups:
        f, amp, orders = members[0]
        if len(members) > 1:
            amp = sum(e[1] for e in members)
            orders = max(members, key=_entry_size)[2]
        power_w = amp.real * amp.real + amp.imag * amp.imag
        if power_w >= floor_w and power_w > 0.0:
            out.append(Product(f, 10.0 * math.log10(power_w) + 30.0, orders))
    return tuple(out)


def _entry_freq(entry: _Entry) -> float:
    return entry[0]


def _entry_size(entry: _Entry) -> float:
    return abs(entry[1])


# --- loading -----------------------------------------------------------------------------
def part_from_file_model(model: PartFile, source: str = "") -> MixerPart:
    """Build a :class:`MixerPart` from a validated part file."""

    def port(t: PortTable) -> PortNetwork:
        return PortNetwork(t.resistance, t.return_loss, t.highpass, t.lowpass)

    core, mis, iso = model.core, model.mismatch, model.isolation
    return MixerPart(
        name=model.part.name,
        conversion=model.part.conversion,
        description=model.part.description,
        tail_current_a=core.tail_current,
        emitter_degeneration_ohm=core.emitter_degeneration,
        cells=core.cells,
        bias=core.bias,
        reference_temperature_c=core.reference_temperature,
        nominal_supply_v=core.nominal_supply,
        min_supply_v=core.min_supply,
        tail_supply_coeff_per_v=core.tail_supply_coeff,
        aux_current_a=core.aux_current,
        aux_supply_coeff_per_v=core.aux_supply_coeff,
        quad_offset_1_v=mis.quad_offset_1,
        quad_offset_2_v=mis.quad_offset_2,
        rf_pair_offset_v=mis.rf_pair_offset,
        rf_port=port(model.ports.rf),
        lo_port=port(model.ports.lo),
        if_port=port(model.ports.if_),
        isolation_lo_rf_db=iso.lo_to_rf,
        isolation_lo_if_db=iso.lo_to_if,
        isolation_rf_if_db=iso.rf_to_if,
        isolation_rf_lo_db=iso.rf_to_lo,
        isolation_reference_hz=iso.reference_frequency,
        isolation_lo_rf_slope_db_per_octave=iso.lo_to_rf_slope,
        isolation_lo_if_slope_db_per_octave=iso.lo_to_if_slope,
        isolation_rf_if_slope_db_per_octave=iso.rf_to_if_slope,
        isolation_rf_lo_slope_db_per_octave=iso.rf_to_lo_slope,
        noise_figure_db=model.noise.figure,
        noise_figure_tempco_db_per_c=model.noise.figure_tempco,
        cm_second_order=core.cm_second_order,
        load_mismatch=mis.load,
        noise_lo_nominal_dbm=model.noise.lo_nominal,
        noise_switch_share=model.noise.switch_share,
        max_lo_order=model.model.max_lo_order,
        max_rf_order=model.model.max_rf_order,
        floor_dbm=model.model.floor,
        source=source,
    )


def _resolve(path_or_name: str | os.PathLike[str]) -> Path:
    text = os.fspath(path_or_name)
    candidate = Path(text)
    if candidate.suffix.lower() == ".toml" or candidate.exists() or any(
        sep in text for sep in ("/", "\\")
    ):
        return candidate
    shipped = PARTS_DIR / f"{text.lower()}.toml"
    if shipped.is_file():
        return shipped
    raise InputError(
        f"no part named {text!r}",
        where="part",
        fix=f"give a .toml part file or one of the shipped parts: {', '.join(shipped_parts())}",
    )


def load_part(path_or_name: str | os.PathLike[str]) -> MixerPart:
    """Load a part from a TOML file, or a shipped part by name (``"ideal"``, …).

    Every problem raises :class:`~sweeprig.errors.InputError` naming the file, line and key.
    """
    path = _resolve(path_or_name)
    doc = load_document(path)
    try:
        model = PartFile.model_validate(doc.data)
    except ValidationError as exc:
        raise _part_error(validation_error(PartFile, exc, doc.where)) from None
    return part_from_file_model(model, source=doc.display)


_SCHEMA_HINT = "the part-file keys are listed in sweeprig/sim/mixer/part.py"


def _part_error(error: InputError) -> InputError:
    """Point generic fixes at the part-file schema rather than the sequence format."""
    fix = error.fix
    if fix and "docs/" in fix:
        fix = fix[: fix.index("(see docs/")].strip() if "(see docs/" in fix else _SCHEMA_HINT
        fix = f"{fix} ({_SCHEMA_HINT})" if fix != _SCHEMA_HINT else fix
    return InputError(error.what, where=error.where, fix=fix)


def part_from_mapping(
    data: dict[str, Any], where: Callable[[tuple[str | int, ...]], str] | None = None
) -> MixerPart:
    """Build a part from an already parsed table (same schema as a part file)."""
    try:
        model = PartFile.model_validate(data)
    except ValidationError as exc:
        locate = where or (lambda loc: "part: " + ".".join(str(p) for p in loc))
        raise _part_error(validation_error(PartFile, exc, locate)) from None
    return part_from_file_model(model, source="<table>")
