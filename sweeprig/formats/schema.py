"""JSON Schemas of the sequence and bench files, for editors that validate TOML as you type."""

from __future__ import annotations

import json
from typing import Any

from sweeprig.formats.bench import Bench
from sweeprig.formats.sequence import Sequence

SCHEMAS = {"sequence": Sequence, "bench": Bench}


def json_schema(which: str) -> dict[str, Any]:
    """The JSON Schema (draft 2020-12, as pydantic writes it) of "sequence" or "bench"."""
    model = SCHEMAS[which]
    schema = model.model_json_schema(by_alias=True, mode="validation")
    _allow_auto_analyzer(schema)
    if which == "sequence":
        _allow_direction_words(schema)
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    schema["title"] = f"sweeprig {which} file"
    return schema


def _allow_auto_analyzer(node: Any) -> None:
    """``analyzer = "auto"`` is accepted wherever an analyzer table is."""
    if isinstance(node, dict):
        props = node.get("properties")
        if isinstance(props, dict) and "AnalyzerSettings" in json.dumps(props.get("analyzer")):
            original = props["analyzer"]
            props["analyzer"] = {
                "anyOf": [{k: v for k, v in original.items() if k not in ("description",)},
                          {"const": "auto"}],
                "description": original.get("description", "analyzer settings, or \"auto\""),
            }
        for value in node.values():
            _allow_auto_analyzer(value)
    elif isinstance(node, list):
        for value in node:
            _allow_auto_analyzer(value)


def _allow_direction_words(schema: dict[str, Any]) -> None:
    """The keys of :mod:`sweeprig.formats.vocabulary` (an upconverter's trade words and the
    direction-neutral ones), which the loader turns into the model's before validation. Which
    key is the input depends on ``conversion``, so no study key is required here."""
    from sweeprig.formats.vocabulary import NEUTRAL_KINDS, PART_KEYS

    defs = schema["$defs"]
    study = defs["Study"]["properties"]
    axis_frequency, axis_power = study["rf_frequency"], study["rf_power"]

    def like(base: dict[str, Any], description: str) -> dict[str, Any]:
        return {**base, "description": description}

    study["rf_frequency"] = like(axis_frequency, "downconverter: the RF input (frequency "
                                 "axis); upconverter: the RF output (one value, or a sweep the "
                                 "LO tracks)")
    study["rf_power"] = like(axis_power, "downconverter: the RF input power (axis)")
    study["if_frequency"] = like(axis_frequency, "downconverter: the IF output (one value, or "
                                 "a sweep the LO tracks); upconverter: the IF input (axis)")
    study["if_power"] = like(axis_power, "upconverter: the IF input power (axis)")
    study["input_frequency"] = like(axis_frequency, "the input frequency, either direction")
    study["input_power"] = like(axis_power, "the input power, either direction")
    study["output_frequency"] = like(axis_frequency, "the output frequency, either direction "
                                     "(one value, or a sweep the LO tracks)")
    defs["Study"]["required"] = [k for k in defs["Study"].get("required", [])
                                 if k not in ("rf_frequency", "rf_power")]
    nesting = study["nesting"]["items"]
    if "enum" in nesting:
        nesting["enum"] = [*nesting["enum"], "if_frequency", "if_power", "input_frequency",
                           "input_power"]
    kinds = study["read"]["items"]["oneOf"][0]
    kinds["enum"] = [*kinds["enum"], *NEUTRAL_KINDS]
    spec_kind = defs["ReadingSpec"]["properties"]["kind"]
    if "enum" in spec_kind:
        spec_kind["enum"] = [*spec_kind["enum"], *NEUTRAL_KINDS]
    mixing = defs["Mixing"]["properties"]
    single = mixing["if_frequency"]
    mixing["if_frequency"] = like(single, "downconverter: the IF output the LO keeps the "
                                  "output at")
    mixing["rf_frequency"] = like(single, "upconverter: the RF output the LO keeps the output at")
    mixing["output_frequency"] = like(single, "the output frequency, either direction")
    part = defs["Part"]["properties"]
    for table in PART_KEYS.values():
        for key, model_key in table.items():
            part.setdefault(key, like(part[model_key], f"isolation in the words of the "
                                      f"conversion direction (model key {model_key})"))


def json_schema_text(which: str) -> str:
    """:func:`json_schema` as indented JSON text."""
    return json.dumps(json_schema(which), indent=2, ensure_ascii=False) + "\n"
