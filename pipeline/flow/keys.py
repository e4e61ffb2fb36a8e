"""The key tables of docs/workflow.md, generated from the workflow schema (one source for both).

``python -m pipeline.flow.keys docs/workflow.md`` rewrites the tables between the
``<!-- keys: SECTION -->`` and ``<!-- /keys -->`` markers; tests/test_docs.py checks they are current.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

from . import workflow as wf

#: the placeholder shown for the names of a table's entries, by the key that holds them
PLACEHOLDER = {"parts": "PART", "power": "PART", "generation": "PART", "reference_by_part": "PART",
               "flux": "SURFACE", "convection": "SURFACE", "radiation": "SURFACE", "fixed_temperature": "SURFACE",
               "supports": "SURFACE", "pressure": "SURFACE", "force": "SURFACE", "stages": "NAME", "ambient": "SURFACE",
               "probes": "NAME", "films": "SURFACE", "preload": "SECTION", "interfaces": "NAME", "cavities": "NAME",
               "lines": "NAME"}
UNITS = {"K": "K", "m": "m", "W": "W", "W/m**3": "W/m³", "W/m**2": "W/m²", "W/(m**2*K)": "W/(m²·K)", "Pa": "Pa",
         "N": "N", "N/m**3": "N/m³", "m/s**2": "m/s²", "B": "bytes", "s": "s",
         "m**2*K/W": "m²·K/W", "W/K": "W/K"}
MARKER = re.compile(r"(<!-- keys: (?P<section>[\w-]+) -->\n)(.*?)(<!-- /keys -->)", re.S)


def _resolve(node: dict, defs: dict) -> dict:
    while "$ref" in node:
        node = defs[node["$ref"].split("/")[-1]] | {k: v for k, v in node.items() if k != "$ref"}
    return node


def _type(node: dict, defs: dict) -> str:
    node = _resolve(node, defs)
    if "x-unit" in node:
        bounds = {"exclusiveMinimum": "> ", "minimum": "≥ "}
        number = next((b for b in node["anyOf"] if b.get("type") == "number"), {})
        limit = "".join(f", {w}{number[k]:g}" for k, w in bounds.items() if k in number)
        return UNITS.get(node["x-unit"], node["x-unit"]) + limit
    if "anyOf" in node:
        kinds = [_type(b, defs) for b in node["anyOf"] if b.get("type") != "null"]
        return " or ".join(dict.fromkeys(kinds))
    if "enum" in node:
        return ", ".join(f"`{v}`" for v in node["enum"])
    if "const" in node:
        return f"`{node['const']}`"
    t = node.get("type")
    if t == "array":
        items = node.get("items", {})
        count = node.get("minItems")
        inner = _type(items, defs) if items else "values"
        return f"{count} × {inner}" if count and count == node.get("maxItems") else f"list of {inner}"
    if t == "object":
        return "table"
    word = {"string": "text", "number": "number", "integer": "integer", "boolean": "true/false"}.get(t, str(t))
    bounds = {"exclusiveMinimum": "> ", "minimum": "≥ ", "exclusiveMaximum": "< ", "maximum": "≤ "}
    return word + "".join(f", {w}{node[k]:g}" for k, w in bounds.items() if k in node)


def _default(name: str, node: dict, required: list) -> str:
    if name in required:
        return "required"
    if "default" not in node or node["default"] in (None, {}, []):
        return "none"
    value = node["default"]
    if value == "":
        return '`""`'
    return f"`{json.dumps(value)}`" if not isinstance(value, str) else f"`{value}`"


def _placeholder(name: str, top: bool) -> str:
    return "NAME" if name == "materials" and top else "PART" if name == "materials" else PLACEHOLDER.get(name, "NAME")


def rows(node: dict, defs: dict, prefix: str = "", top: bool = False) -> list[tuple[str, str, str, str]]:
    """(key path, type and unit, default, meaning) of every key below a schema table (``top``: the
    file's own table, whose ``materials`` are named materials, not parts)."""
    node = _resolve(node, defs)
    out = []
    required = node.get("required", [])
    for name, prop in node.get("properties", {}).items():
        if (name == "kind" and prefix == "") or name == "stages":
            continue  # the stage kinds have tables of their own
        resolved = _resolve(prop, defs)
        inner = resolved.get("additionalProperties")
        member = next((_resolve(b, defs) for b in resolved.get("anyOf", []) if b.get("type") != "null"), resolved)
        meaning = prop.get("description") or resolved.get("description", "")
        meaning = "" if re.fullmatch(r"\[[^\]]*\]", meaning or "") else meaning
        if isinstance(inner, dict) and "properties" in _resolve(inner, defs) and name != "stages":
            out += rows(inner, defs, f"{prefix}{name}.{_placeholder(name, top)}.")
        elif "properties" in member and name not in ("stages",):
            out += rows(member, defs, f"{prefix}{name}.")
        else:
            kind = _type(inner, defs) if isinstance(inner, dict) else _type(prop, defs)
            key = f"{prefix}{name}.{_placeholder(name, top)}" if isinstance(inner, dict) and inner else \
                f"{prefix}{name}"
            out.append((key, kind, _default(name, resolved, required), meaning))
    return out


def tables() -> dict[str, str]:
    """Section -> Markdown table: ``top`` (the file's own keys) and one per stage kind."""
    schema = wf.model().model_json_schema()
    defs = schema.get("$defs", {})
    out = {"top": rows(schema, defs, top=True)}
    out["top"].insert(0, ("extends", "path", "none", "a workflow this one builds on; tables merge key by key, "
                                                     "other values are replaced"))
    from .. import kinds

    for name, module in kinds.all_kinds().items():
        out[name] = rows(module.Schema.model_json_schema(), module.Schema.model_json_schema().get("$defs", {}))
    head = "| key | type, unit | default | meaning |\n|---|---|---|---|\n"
    return {k: head + "".join(f"| `{a}` | {b} | {c} | {_cell(d)} |\n" for a, b, c, d in v) for k, v in out.items()}


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def rewrite(text: str) -> str:
    """``text`` with every marked table replaced by the generated one."""
    generated = tables()

    def one(match):
        return match.group(1) + generated[match.group("section")] + match.group(4)

    return MARKER.sub(one, text)


if __name__ == "__main__":
    path = Path(sys.argv[1] if len(sys.argv) > 1 else "docs/workflow.md")
    path.write_text(rewrite(path.read_text()))
    print(f"{path}: key tables regenerated")
