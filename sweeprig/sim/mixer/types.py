"""Value types of the mixer model's interface (shared by the model and the simulated world).

Powers are in dBm at the mixer's own port planes (cable losses are the world's business),
frequencies in Hz, temperatures in degC, voltages in V, currents in A, phases in radians.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial
from typing import NamedTuple

import numpy as np
from numpy.typing import NDArray


@dataclass(frozen=True)
class ToneInput:
    """One source's signal arriving at a mixer port.

    ``power_dbm`` is the available power of the fundamental at the port plane.
    ``harmonics_dbc[i]`` is the level of harmonic i+2 relative to the fundamental (dBc), so a
    source with a −35 dBc second harmonic has ``harmonics_dbc=(-35.0,)``. Harmonics share the
    fundamental's phase axis (they are commensurate with it by construction).
    """

    freq_hz: float
    power_dbm: float
    phase_rad: float = 0.0
    harmonics_dbc: tuple[float, ...] = ()


@dataclass(frozen=True)
class OperatingPoint:
    """Conditions of the part: die temperature (degC) and supply voltage (V)."""

    temperature_c: float = 25.0
    supply_v: float = 3.3


class Product(NamedTuple):
    """One spectral line at a mixer port.

    ``orders`` are the signed multipliers of the input tones that made it, in the order
    (LO, RF1, RF2, ...): the line sits at |sum(orders[k] * f[k])|. ``power_dbm`` is the power
    delivered into a matched 50 ohm load at that port.

    A named tuple (immutable, built positionally or by keyword, fields read by name): a
    response holds hundreds of lines and a tuple is several times cheaper to build than a
    frozen dataclass. Use ``product._replace(power_dbm=...)`` for a changed copy.
    """

    freq_hz: float
    power_dbm: float
    orders: tuple[int, ...]


class PortLevels:
    """Lines at one port as arrays, sorted by frequency: ``freq_hz`` (Hz), ``power_dbm``
    (dBm into a matched 50 ohm load) and ``orders`` (an object array of order tuples, as
    :class:`Product`). What the model computes; the :class:`Product` tuples are made from it
    only when someone reads them (a response holds hundreds of lines).

    Immutable. The sweep path gives the orders as integer codes into a table of order
    tuples (:meth:`coded`); the object array is made on first reading of ``orders``
    (the simulated bench reads frequencies and powers only)."""

    __slots__ = ("_codes", "_orders", "_table", "freq_hz", "power_dbm")
    freq_hz: NDArray[np.float64]
    power_dbm: NDArray[np.float64]

    def __init__(self, freq_hz: NDArray[np.float64], power_dbm: NDArray[np.float64],
                 orders: NDArray[np.object_]) -> None:
        self._fill(freq_hz, power_dbm, orders, None, None)

    @classmethod
    def coded(cls, freq_hz: NDArray[np.float64], power_dbm: NDArray[np.float64],
              codes: NDArray[np.intp], table: NDArray[np.object_]) -> PortLevels:
        """Lines whose orders are ``table[codes]`` (made when first read)."""
        levels = cls.__new__(cls)
        levels._fill(freq_hz, power_dbm, None, codes, table)
        return levels

    def _fill(self, freq_hz: NDArray[np.float64], power_dbm: NDArray[np.float64],
              orders: NDArray[np.object_] | None, codes: NDArray[np.intp] | None,
              table: NDArray[np.object_] | None) -> None:
        """Set every slot once (the class is immutable: no ``__setattr__``)."""
        init = object.__setattr__
        init(self, "freq_hz", freq_hz)
        init(self, "power_dbm", power_dbm)
        init(self, "_orders", orders)
        init(self, "_codes", codes)
        init(self, "_table", table)

    @property
    def orders(self) -> NDArray[np.object_]:
        orders = self._orders
        if orders is None:
            orders = self._table[self._codes]  # type: ignore[index]
            object.__setattr__(self, "_orders", orders)
            object.__setattr__(self, "_codes", None)
            object.__setattr__(self, "_table", None)
        return orders

    def __setattr__(self, name: str, value: object) -> None:
        raise AttributeError(f"PortLevels is immutable: cannot set {name!r}")

    def __reduce__(self) -> tuple[type[PortLevels], tuple[object, ...]]:
        """Copies and pickles rebuild the lines through the constructor."""
        return (PortLevels, (self.freq_hz, self.power_dbm, self.orders))

    def __repr__(self) -> str:
        return f"PortLevels({self.freq_hz.size} lines)"

    def products(self) -> tuple[Product, ...]:
        """The lines as :class:`Product` tuples."""
        return tuple(map(_new_product, zip(self.freq_hz.tolist(), self.power_dbm.tolist(),
                                           self.orders.tolist(), strict=True)))

    @staticmethod
    def of(products: tuple[Product, ...]) -> PortLevels:
        """Arrays of a tuple of products (their order kept)."""
        n = len(products)
        orders = np.empty(n, dtype=object)
        orders[:] = [p[2] for p in products]
        return PortLevels(np.fromiter((p[0] for p in products), float, n),
                          np.fromiter((p[1] for p in products), float, n), orders)


class PortSlice(tuple):  # type: ignore[type-arg]
    """One point's lines inside arrays shared by the points of a sweep (the sweep path's
    output): ``(freq_hz, power_dbm, codes, table, start, stop)``; a response makes its
    :class:`PortLevels` from it when the port is first read (a tuple: a few hundred of
    these per call cost less than as many :class:`PortLevels`)."""

    __slots__ = ()

    def levels(self) -> PortLevels:
        """The point's lines as :class:`PortLevels` (views into the shared arrays)."""
        freq, power, codes, table, start, stop = self
        return PortLevels.coded(freq[start:stop], power[start:stop], codes[start:stop], table)


class DeferredPort(tuple):  # type: ignore[type-arg]
    """A port's lines made when the port is first read: ``(make, *arguments)``, and
    ``make(*arguments)`` gives the tuple of :class:`Product` (the one-call path's input and
    LO ports: a few leakage lines, which the simulated bench reads only when its switch
    routes that port to the analyzer)."""

    __slots__ = ()

    def made(self) -> tuple[Product, ...]:
        """The port's lines."""
        make, *arguments = self
        return make(*arguments)  # type: ignore[no-any-return]


_new_product = partial(tuple.__new__, Product)  # Product from a (freq, power, orders) tuple
_PORTS = ("if_port", "rf_port", "lo_port")


class MixerResponse:
    """Everything the mixer puts out for one set of inputs (immutable).

    ``if_port``: lines at the output (IF for a downconverter) port.
    ``rf_port``: lines leaving the RF (input) port: LO leakage (LO→RF isolation) and reflections.
    For an upconverter the fields keep their names: ``if_port`` holds the output (RF) port's
    lines and ``rf_port`` the input (IF) port's lines.
    ``lo_port``: lines leaving the LO port (RF→LO leakage), may be empty.
    ``if_noise_dbm_per_hz``: output noise density at the IF port (flat over the IF band).
    ``supply_current_a``: DC current drawn from the supply.

    Each port is given as a tuple of :class:`Product`, as :class:`PortLevels` arrays, as
    a :class:`PortSlice` of a sweep's arrays (made into :class:`PortLevels` on first
    reading) or as a :class:`DeferredPort` (made into its products on first reading); the
    port attributes always read as tuples of products (made once, on first
    reading), and :meth:`levels` reads a port as arrays without making them.
    """

    __slots__ = ("_given", "_made", "if_noise_dbm_per_hz", "notes", "supply_current_a")
    if_noise_dbm_per_hz: float
    supply_current_a: float
    notes: dict[str, float]

    def __init__(
        self,
        if_port: tuple[Product, ...] | PortLevels | PortSlice | DeferredPort,
        rf_port: tuple[Product, ...] | PortLevels | PortSlice | DeferredPort = (),
        lo_port: tuple[Product, ...] | PortLevels | PortSlice | DeferredPort = (),
        if_noise_dbm_per_hz: float = -174.0,
        supply_current_a: float = 0.0,
        notes: dict[str, float] | None = None,
    ) -> None:
        init = object.__setattr__
        init(self, "_given", {"if_port": if_port, "rf_port": rf_port, "lo_port": lo_port})
        init(self, "_made", {})
        init(self, "if_noise_dbm_per_hz", if_noise_dbm_per_hz)
        init(self, "supply_current_a", supply_current_a)
        init(self, "notes", {} if notes is None else notes)

    def __setattr__(self, name: str, value: object) -> None:
        raise AttributeError(f"MixerResponse is immutable: cannot set {name!r}")

    def _resolved(self, name: str) -> tuple[Product, ...] | PortLevels:
        """A port as given, a :class:`PortSlice` made into its :class:`PortLevels` and a
        :class:`DeferredPort` into its products (each once)."""
        given = self._given[name]
        kind = type(given)
        if kind is PortSlice:
            given = self._given[name] = given.levels()
        elif kind is DeferredPort:
            given = self._given[name] = given.made()
        return given

    def _port(self, name: str) -> tuple[Product, ...]:
        given = self._resolved(name)
        if not isinstance(given, PortLevels):
            return given
        made = self._made.get(name)
        if made is None:
            made = self._made[name] = given.products()
        return made

    @property
    def if_port(self) -> tuple[Product, ...]:
        return self._port("if_port")

    @property
    def rf_port(self) -> tuple[Product, ...]:
        return self._port("rf_port")

    @property
    def lo_port(self) -> tuple[Product, ...]:
        return self._port("lo_port")

    def levels(self, port: str) -> PortLevels:
        """A port's lines as arrays (``port``: ``"if_port"``, ``"rf_port"`` or
        ``"lo_port"``)."""
        given = self._resolved(port)
        return given if isinstance(given, PortLevels) else PortLevels.of(given)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, MixerResponse):
            return NotImplemented
        return (all(self._port(p) == other._port(p) for p in _PORTS)
                and self.if_noise_dbm_per_hz == other.if_noise_dbm_per_hz
                and self.supply_current_a == other.supply_current_a
                and self.notes == other.notes)

    __hash__ = None  # type: ignore[assignment]  # mutable notes, as the dataclass had

    def __reduce__(self) -> tuple[type[MixerResponse], tuple[object, ...]]:
        """Copies and pickles rebuild the response through its constructor."""
        given = self._resolved
        return (MixerResponse, (given("if_port"), given("rf_port"), given("lo_port"),
                                self.if_noise_dbm_per_hz, self.supply_current_a, self.notes))

    def __repr__(self) -> str:
        ports = ", ".join(f"{p}={len(self.levels(p).freq_hz)} lines" for p in _PORTS)
        return (f"MixerResponse({ports}, if_noise_dbm_per_hz={self.if_noise_dbm_per_hz!r}, "
                f"supply_current_a={self.supply_current_a!r})")
