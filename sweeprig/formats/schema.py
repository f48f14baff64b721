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


def json_schema_text(which: str) -> str:
    """:func:`json_schema` as indented JSON text."""
    return json.dumps(json_schema(which), indent=2, ensure_ascii=False) + "\n"
