"""The sequence vocabulary of both conversion directions, turned into the model's keys.

In the trade, a mixer's RF is the high-frequency side and its IF the low one, whichever way
the signal goes: a downconverter takes RF in and gives IF out, an upconverter takes IF in and
gives RF out (Pozar, *Microwave Engineering*, mixer chapter; the field notes' frequency plan).
A sequence may therefore name the input and output of a study in either of two ways:

====================  ===================  =====================  =======================
meaning               any direction        ``conversion="down"``  ``conversion="up"``
====================  ===================  =====================  =======================
input frequency axis  ``input_frequency``  ``rf_frequency``       ``if_frequency``
input power axis      ``input_power``      ``rf_power``           ``if_power``
output frequency      ``output_frequency`` ``if_frequency``       ``rf_frequency``
LO at the output      ``lo_at_output``     ``lo_at_if``           (neutral name only)
LO at the input       ``lo_at_input``      ``lo_at_rf``           (neutral name only)
input at the output   ``input_at_output``  ``rf_at_if``           (neutral name only)
====================  ===================  =====================  =======================

The output frequency is a study key or a ``[mixing]`` key (the LO then follows the input so
the output stays there). The model itself (:class:`sweeprig.formats.sequence.Study`) keeps
one spelling, the downconverter's: ``rf_*`` is the input, ``if_frequency`` the output, and
the reading kinds ``lo_at_if``/``lo_at_rf``/``rf_at_if`` the output/input ports. This module
translates a file's table into that spelling before validation (:func:`canonical_table`) and
remembers how each key was written, so every message names the key as the file wrote it.

Before this vocabulary, an upconverter's input had to be written ``rf_frequency``/``rf_power``
and its output ``if_frequency``, the opposite of the trade's words. Such a file is never
reinterpreted: an upconverter study that gives ``rf_power``, an upconverter ``[mixing]
if_frequency``, or an upconverter reading named ``lo_at_if``/``lo_at_rf``/``rf_at_if``/
``image`` is refused with the new spelling of each key (:func:`migration_error`). A
downconverter file reads exactly as before.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any

from sweeprig.errors import InputError
from sweeprig.formats.toml_locate import KeyPath, format_key_path

#: Direction-neutral study keys → the model's key.
NEUTRAL_KEYS: Mapping[str, str] = MappingProxyType({
    "input_frequency": "rf_frequency",
    "input_power": "rf_power",
    "output_frequency": "if_frequency",
})
#: The trade's study keys per conversion → the model's key.
TRADE_KEYS: Mapping[str, Mapping[str, str]] = MappingProxyType({
    "down": MappingProxyType({"rf_frequency": "rf_frequency", "rf_power": "rf_power",
                              "if_frequency": "if_frequency"}),
    "up": MappingProxyType({"if_frequency": "rf_frequency", "if_power": "rf_power",
                            "rf_frequency": "if_frequency"}),
})
#: Direction-neutral reading kinds → the model's kind.
NEUTRAL_KINDS: Mapping[str, str] = MappingProxyType({
    "lo_at_output": "lo_at_if",
    "lo_at_input": "lo_at_rf",
    "input_at_output": "rf_at_if",
})
#: Reading kinds that name a port by RF/IF; in an upconverter they are refused (their old
#: meaning took the input port for the RF one), with the neutral kind to write instead.
PORT_NAMED_KINDS: Mapping[str, str] = MappingProxyType({
    "lo_at_if": "lo_at_output", "lo_at_rf": "lo_at_input", "rf_at_if": "input_at_output",
})

#: ``[part]`` isolation keys: direction-neutral and per conversion → the model's key (the
#: model's ``lo_if`` is the output port, ``lo_rf`` the input port, ``rf_if`` input→output).
PART_KEYS: Mapping[str, Mapping[str, str]] = MappingProxyType({
    "neutral": MappingProxyType({
        "expected_lo_output_isolation": "expected_lo_if_isolation",
        "expected_lo_input_isolation": "expected_lo_rf_isolation",
        "expected_input_output_isolation": "expected_rf_if_isolation"}),
    "down": MappingProxyType({}),
    "up": MappingProxyType({
        "expected_lo_rf_isolation": "expected_lo_if_isolation",
        "expected_lo_if_isolation": "expected_lo_rf_isolation",
        "expected_if_rf_isolation": "expected_rf_if_isolation"}),
})
#: Most values an output-frequency sweep may hold (it becomes a list of LO frequencies).
MAX_OUTPUT_SWEEP = 100_000

_MODEL_TO_NEUTRAL = {v: k for k, v in NEUTRAL_KEYS.items()}


def trade_key(model_key: str, conversion: str) -> str:
    """How the trade spells a model key (``rf_frequency``…) for ``conversion``."""
    for file_key, key in TRADE_KEYS.get(conversion, TRADE_KEYS["down"]).items():
        if key == model_key:
            return file_key
    return model_key


@dataclass(frozen=True)
class Spelling:
    """How a file spelled the keys the model knows by other names.

    ``paths`` maps a model key path (``("study", 0, "rf_frequency")``) to the file's
    (``("study", 0, "if_frequency")``); :meth:`file_path` applies it to any path below.
    """

    paths: Mapping[KeyPath, KeyPath] = field(default_factory=dict)

    def file_path(self, key_path: KeyPath) -> KeyPath:
        """The file's spelling of a model key path (unchanged when nothing was renamed)."""
        path = tuple(key_path)
        for k in range(len(path), 0, -1):
            renamed = self.paths.get(path[:k])
            if renamed is not None:
                return renamed + path[k:]
        return path

    def where(self, where: Callable[[KeyPath], str]) -> Callable[[KeyPath], str]:
        """``where`` (a locator of file keys) made to take model key paths."""
        return lambda key_path: where(self.file_path(tuple(key_path)))


def _conversion(data: Mapping[str, Any]) -> str:
    mixing = data.get("mixing")
    value = mixing.get("conversion") if isinstance(mixing, Mapping) else None
    return value if value in ("down", "up") else "down"


def _problem(where: Callable[[KeyPath], str], path: KeyPath, what: str, fix: str
             ) -> InputError:
    return InputError(what, where=where(path), fix=fix)


def migration_error(data: Mapping[str, Any], where: Callable[[KeyPath], str]
                    ) -> InputError | None:
    """The refusal of an upconverter file written in the old spelling (rf_* for its input),
    naming the first such key and every rename the file needs; None for any other file."""
    if _conversion(data) != "up":
        return None
    renames: list[tuple[KeyPath, str, str]] = []
    mixing = data.get("mixing")
    old_style = isinstance(mixing, Mapping) and "if_frequency" in mixing
    if old_style:
        renames.append((("mixing", "if_frequency"), "if_frequency",
                        "rf_frequency (or output_frequency)"))
    studies = data.get("study")
    old_style |= any(isinstance(st, Mapping) and "rf_power" in st
                     for st in (studies if isinstance(studies, list) else ()))
    part = data.get("part")
    if isinstance(part, Mapping):
        old_part = {"expected_rf_if_isolation": "expected_if_rf_isolation"}
        if old_style:  # the old spelling named the output port IF and the input port RF
            old_part |= {"expected_lo_if_isolation": "expected_lo_rf_isolation",
                         "expected_lo_rf_isolation": "expected_lo_if_isolation"}
        renames += [(("part", key), key, new) for key, new in old_part.items() if key in part]
    for i, study in enumerate(studies if isinstance(studies, list) else ()):
        if not isinstance(study, Mapping) or "rf_power" not in study:
            continue
        for old, new in (("rf_frequency", "if_frequency (or input_frequency)"),
                         ("rf_power", "if_power (or input_power)"),
                         ("if_frequency", "rf_frequency (or output_frequency)")):
            if old in study:
                renames.append((("study", i, old), old, new))
        nesting = study.get("nesting")
        if isinstance(nesting, list) and any(n in ("rf_frequency", "rf_power") for n in nesting):
            renames.append((("study", i, "nesting"), "nesting rf_frequency/rf_power",
                            "if_frequency/if_power"))
    for path, kind in _reading_kinds(data):
        if kind in PORT_NAMED_KINDS:
            renames.append((path, f"read {kind!r}", repr(PORT_NAMED_KINDS[kind])))
    if not renames:
        return None
    first = renames[0][0]
    listed = "; ".join(f"{format_key_path(p)}: {old} → {new}" for p, old, new in renames)
    return _problem(
        where, first,
        "this upconverter is written in the old spelling, where rf_* named the input and "
        "if_frequency the output; in the trade's words an upconverter's input is its IF and "
        "its output its RF, so sweeprig will not guess which is meant",
        f"rename (the meaning stays the same): {listed}")


def _reading_kinds(data: Mapping[str, Any]) -> list[tuple[KeyPath, str]]:
    out: list[tuple[KeyPath, str]] = []
    studies = data.get("study")
    for i, study in enumerate(studies if isinstance(studies, list) else ()):
        read = study.get("read") if isinstance(study, Mapping) else None
        for k, item in enumerate(read if isinstance(read, list) else ()):
            if isinstance(item, str):
                out.append((("study", i, "read", k), item))
            elif isinstance(item, Mapping) and isinstance(item.get("kind"), str):
                out.append((("study", i, "read", k, "kind"), item["kind"]))
    return out


def canonical_table(data: Mapping[str, Any], where: Callable[[KeyPath], str]
                    ) -> tuple[dict[str, Any], Spelling]:
    """A sequence table in the model's spelling, and how the file spelled each renamed key.

    ``where`` locates a key path of the file (for the messages). Raises
    :class:`~sweeprig.errors.InputError` for an old-spelling upconverter file
    (:func:`migration_error`) and for a key given twice under two spellings.
    """
    refused = migration_error(data, where)
    if refused is not None:
        raise refused
    conversion = _conversion(data)
    names = {**NEUTRAL_KEYS, **TRADE_KEYS[conversion]}
    paths: dict[KeyPath, KeyPath] = {}
    out = dict(data)

    def rename_keys(table: Mapping[str, Any], base: KeyPath, allowed: Mapping[str, str]
                    ) -> dict[str, Any]:
        result: dict[str, Any] = {}
        written: dict[str, str] = {}
        for key, value in table.items():
            target = allowed.get(key, key) if isinstance(key, str) else key
            if target in written:
                raise _problem(
                    where, (*base, key),
                    f"{written[target]!r} and {key!r} name the same thing "
                    f"({_meaning(target)})", f"keep one of them: {written[target]!r} or "
                    f"{key!r}")
            written[target] = key
            result[target] = value
            if target != key:
                paths[(*base, target)] = (*base, key)
        return result

    part = data.get("part")
    if isinstance(part, Mapping):
        out["part"] = rename_keys(part, ("part",), {**PART_KEYS["neutral"],
                                                   **PART_KEYS[conversion]})
    mixing = data.get("mixing")
    lo_side = mixing.get("lo_side", "low") if isinstance(mixing, Mapping) else "low"
    if isinstance(mixing, Mapping):
        mixing_names = {"output_frequency": "if_frequency",
                        trade_key("if_frequency", conversion): "if_frequency"}
        if conversion == "up":  # the up trade word for the input has no place in [mixing]
            mixing_names = {k: v for k, v in mixing_names.items() if k != "if_frequency"}
        out["mixing"] = rename_keys(mixing, ("mixing",), mixing_names)
    studies = data.get("study")
    if isinstance(studies, list):
        new_studies: list[Any] = []
        for i, study in enumerate(studies):
            if not isinstance(study, Mapping):
                new_studies.append(study)
                continue
            table = rename_keys(study, ("study", i), names)
            for model_key in ("rf_frequency", "rf_power"):
                # (a downconverter's missing key is named well by the model's own message)
                if conversion == "up" and model_key not in table:
                    raise _problem(
                        where, ("study", i),
                        f"study[{i}] of this upconverter does not give "
                        f"{_meaning(model_key)}",
                        f"give {trade_key(model_key, conversion)} = ... (or "
                        f"{_MODEL_TO_NEUTRAL[model_key]}): for a {conversion}converter the "
                        f"input is its {'IF' if conversion == 'up' else 'RF'}")
            swept_output = _is_sweep(table.get("if_frequency"))
            if swept_output:
                table = _output_sweep_as_lo(table, i, conversion, str(lo_side), where,
                                            paths.get(("study", i, "if_frequency"),
                                                      ("study", i, "if_frequency")))
                paths[("study", i, "lo_frequency")] = paths.pop(
                    ("study", i, "if_frequency"), ("study", i, "if_frequency"))
            nesting = table.get("nesting")
            if isinstance(nesting, list):
                table["nesting"] = [names.get(n, n) if isinstance(n, str) else n
                                    for n in nesting]
                if swept_output:
                    table["nesting"] = ["lo_frequency" if n == "if_frequency" else n
                                        for n in table["nesting"]]
            read = table.get("read")
            if isinstance(read, list):
                table["read"] = [_canonical_kind(item) for item in read]
            new_studies.append(table)
        out["study"] = new_studies
    return out, Spelling(MappingProxyType(paths))


def _is_sweep(value: Any) -> bool:
    return isinstance(value, list | Mapping)


def _output_sweep_as_lo(table: dict[str, Any], i: int, conversion: str, lo_side: str,
                        where: Callable[[KeyPath], str], file_path: KeyPath) -> dict[str, Any]:
    """A study sweeping its output frequency at a fixed input: the LO tracks the output, so
    the sweep becomes the list of LO frequencies f_LO = lo_for_if(f_in, f_out) (the field
    notes' frequency plan), point for point in the output's order."""
    from pydantic import TypeAdapter, ValidationError

    from sweeprig.errors import UnitError
    from sweeprig.formats.fields import RangeSpec, axis
    from sweeprig.plan.axes import axis_from_spec
    from sweeprig.plan.frequencies import lo_for_if
    from sweeprig.units import parse_quantity

    key = file_path[-1]
    if "lo_frequency" in table:
        raise _problem(where, file_path, f"the study sweeps the output ({key}) and gives "
                       "lo_frequency", "give one of them: the LO follows a swept output, or "
                       "is swept itself")
    f_in = table.get("rf_frequency")
    if _is_sweep(f_in) or f_in is None:
        raise _problem(where, file_path, f"the study sweeps the output ({key}) and the input "
                       "frequency", "sweep one of them at a fixed value of the other: the LO "
                       "follows so the output lands where stated")
    try:
        f_in_hz = parse_quantity(f_in, "frequency")
        spec = TypeAdapter(axis("frequency")).validate_python(table["if_frequency"])
    except UnitError as exc:
        raise InputError(exc.what, where=where(file_path), fix=exc.fix) from None
    except ValidationError as exc:
        first = exc.errors(include_url=False)[0]
        raise _problem(where, file_path, f"{key}: {first['msg']}",
                       "write the output sweep as a list or a range {start, stop, step}"
                       ) from None
    count = spec.count() if isinstance(spec, RangeSpec) else len(spec)
    if count > MAX_OUTPUT_SWEEP:
        raise _problem(where, file_path, f"the output sweep holds {count:,} values, above "
                       f"{MAX_OUTPUT_SWEEP:,}", "use a coarser step, or sweep lo_frequency")
    outputs = axis_from_spec("if_frequency", spec).all_values()
    los = [float(lo_for_if(f_in_hz, float(f), conversion, lo_side)) for f in outputs]
    result = {k: v for k, v in table.items() if k != "if_frequency"}
    result["lo_frequency"] = los
    return result


def _canonical_kind(item: Any) -> Any:
    if isinstance(item, str):
        return NEUTRAL_KINDS.get(item, item)
    if isinstance(item, Mapping) and isinstance(item.get("kind"), str):
        return {**item, "kind": NEUTRAL_KINDS.get(item["kind"], item["kind"])}
    return item


def _meaning(model_key: str) -> str:
    return {"rf_frequency": "the input frequency", "rf_power": "the input power",
            "if_frequency": "the output frequency"}.get(model_key, model_key)


def file_key(model_key: str, conversion: str) -> str:
    """The key a message should name for a model key: the trade's word for the direction
    (``rf_frequency`` of the model is ``if_frequency`` in an upconverter's file)."""
    if model_key in _MODEL_TO_NEUTRAL:
        return trade_key(model_key, conversion)
    return model_key
