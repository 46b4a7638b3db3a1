"""Read a YAML run configuration safely, validate it against the package's JSON Schema and fill defaults."""

from __future__ import annotations

import copy
import difflib
import json
from importlib import resources
from pathlib import Path

import jsonschema
import yaml

from .errors import ChairqmError

SCHEMA_FILE = "config.schema.json"


def schema_path() -> Path:
    """Path of the configuration schema; the Snakefile validates with this same file."""
    return Path(str(resources.files("chairqm") / "schemas" / SCHEMA_FILE))


def load_schema(name: str = SCHEMA_FILE) -> dict:
    return json.loads((resources.files("chairqm") / "schemas" / name).read_text())


def _fill_defaults(node, schema):
    """Fill defaults of object properties recursively (the schema's `default` values)."""
    if not isinstance(node, dict) or schema.get("type") != "object":
        return
    for key, sub in schema.get("properties", {}).items():
        if key not in node and "default" in sub:
            node[key] = copy.deepcopy(sub["default"])
        if key in node:
            if sub.get("type") == "object":
                _fill_defaults(node[key], sub)
            elif sub.get("type") == "array" and isinstance(node[key], list):
                for item in node[key]:
                    _fill_defaults(item, sub.get("items", {}))


def settings_defaults() -> dict:
    """The settings block of a configuration that gives none: every default, read from the schema (the
    only place defaults are written)."""
    node = {}
    _fill_defaults(node, load_schema()["properties"]["settings"])
    return node


def _subschema(schema, path):
    node = schema
    for part in path:
        if isinstance(part, int):
            node = node.get("items", {})
        else:
            node = node.get("properties", {}).get(part, {})
    return node


def _where(path) -> str:
    out = ""
    for p in path:
        out += f"[{p}]" if isinstance(p, int) else (("." if out else "") + str(p))
    return out or "top level"


def _messages(cfg: dict, schema: dict) -> list[str]:
    validator = jsonschema.Draft202012Validator(schema)
    msgs = []
    for err in sorted(validator.iter_errors(cfg), key=lambda e: list(map(str, e.absolute_path))):
        path = list(err.absolute_path)
        where = _where(path)
        if err.validator == "additionalProperties":
            known = list(_subschema(schema, path).get("properties", {}))
            extra = [k for k in err.instance if k not in known]
            for k in extra:
                hint = difflib.get_close_matches(str(k), known, n=1)
                tip = f" (did you mean '{hint[0]}'?)" if hint else f" (known keys: {', '.join(known)})"
                msgs.append(f"unknown key '{k}' at {where}{tip}")
        elif err.validator == "oneOf" and path and isinstance(path[-1], int) and len(path) == 2:
            msgs.append(f"{where}: give exactly one of 'smiles' or 'file'")
        elif err.validator == "pattern" and path and path[-1] == "name":
            msgs.append(f"{where}: unsafe molecule name {err.instance!r}: use letters, digits, '-', '_', '.' "
                        "(starting with a letter, digit or '_'; no '/'; at most 64 characters), because it becomes a folder name")
        elif err.validator == "oneOf" and path and path[-1] == "refine":
            if not isinstance(err.instance, dict):
                hint = (" (did you mean 'auto'?)" if isinstance(err.instance, str)
                        and difflib.get_close_matches(err.instance.strip().lower(), ["auto"], n=1, cutoff=0.5) else "")
                msgs.append(f"{where}: give a mapping of refinement settings ({{}} takes every default and "
                            "refines every molecule), 'auto' (refines only the molecules where GFN2-xTB is known "
                            f"to err) or leave it out for no refinement, got {err.instance!r}{hint}")
            else:
                block = next(b for b in err.schema["oneOf"] if b.get("type") == "object")
                for m in _messages(err.instance, block):
                    msgs.append(m.replace("at top level", f"at {where}") if "at top level" in m
                                else f"{where}.{m}")
        elif err.validator == "oneOf" and path and path[-1] == "solvent":
            msgs.append(f"{where}: solvent must be null or {{model: alpb|gbsa, name: <solvent>}}, got {err.instance!r}")
        else:
            msgs.append(f"{where}: {err.message}")
    return msgs


def validate(cfg, base_dir: Path | None = None) -> dict:
    """Validate a configuration dict; return a copy with defaults filled. Raises ChairqmError listing every problem."""
    if not isinstance(cfg, dict):
        raise ChairqmError("the configuration must be a YAML mapping with 'molecules' and 'settings'")
    schema = load_schema()
    msgs = _messages(cfg, schema)
    if not msgs:
        names = [m["name"] for m in cfg["molecules"]]
        seen = set()
        for n in names:
            if n.lower() in seen:
                msgs.append(f"molecule name '{n}' is used twice (names must be unique, case-insensitively, "
                            "because each becomes a folder)")
            seen.add(n.lower())
        for i, m in enumerate(cfg["molecules"]):
            if "file" in m and str(m["file"]).lower().endswith(".xyz") and "charge" not in m:
                msgs.append(f"molecules[{i}] ({m['name']}): an .xyz file carries no charge: add 'charge: 0' "
                            "(or the molecule's charge)")
    if msgs:
        raise ChairqmError("\n".join(msgs))
    out = copy.deepcopy(cfg)
    _fill_defaults(out, schema)
    if base_dir is not None:
        out["_base_dir"] = str(Path(base_dir).resolve())
    return out


#: Largest configuration file read (bytes), and most YAML nodes it may expand to once anchors and aliases
#: are followed: a real configuration of a few hundred molecules is far below both; "billion laughs"
#: documents (aliases of aliases) are refused before anything walks them.
MAX_CONFIG_BYTES = 10_000_000
MAX_EXPANDED_NODES = 200_000


class _StrictLoader(yaml.SafeLoader):
    """yaml.SafeLoader that refuses a key given twice in one mapping (SafeLoader keeps the last silently)."""

    def construct_mapping(self, node, deep=False):
        if isinstance(node, yaml.MappingNode):
            seen = {}
            for key_node, _ in node.value:
                if key_node.tag == "tag:yaml.org,2002:merge":
                    continue
                key = self.construct_object(key_node, deep=True)
                try:
                    hash(key)
                except TypeError:
                    continue             # SafeLoader's own error names an unhashable key
                if key in seen:
                    raise yaml.constructor.ConstructorError(
                        "while constructing a mapping", node.start_mark,
                        f"duplicate key {key!r} (first at line {seen[key] + 1}): give each key once",
                        key_node.start_mark)
                seen[key] = key_node.start_mark.line
        return super().construct_mapping(node, deep=deep)


def _expanded_size(node, memo: dict) -> int:
    """Number of nodes of the document once every alias is replaced by a copy of its anchor's node."""
    k = id(node)
    if k in memo:
        return memo[k]
    memo[k] = 1                          # a recursive alias counts once (SafeLoader refuses it later)
    if isinstance(node, yaml.MappingNode):
        n = 1 + sum(_expanded_size(a, memo) + _expanded_size(b, memo) for a, b in node.value)
    elif isinstance(node, yaml.SequenceNode):
        n = 1 + sum(_expanded_size(a, memo) for a in node.value)
    else:
        n = 1
    memo[k] = n
    return n


def _decode(path: Path, data: bytes) -> str:
    """UTF-8 (with or without a byte-order mark) or UTF-16/UTF-32 with a byte-order mark, as YAML allows;
    anything else is refused with the first offending byte."""
    import codecs
    for bom, enc in ((codecs.BOM_UTF32_LE, "utf-32"), (codecs.BOM_UTF32_BE, "utf-32"),
                     (codecs.BOM_UTF8, "utf-8-sig"), (codecs.BOM_UTF16_LE, "utf-16"), (codecs.BOM_UTF16_BE, "utf-16")):
        if data.startswith(bom):
            try:
                return data.decode(enc)
            except UnicodeDecodeError as exc:
                raise ChairqmError(f"{path}: starts with a {enc.upper()} byte-order mark but is not valid {enc.upper()} "
                                   f"text ({exc.reason} at byte {exc.start}): save it as UTF-8") from None
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[:exc.start].count(b"\n") + 1
        hint = (" (it looks like UTF-16 without a byte-order mark)" if b"\x00" in data[:200] else "")
        raise ChairqmError(f"{path}: not UTF-8 text: byte 0x{data[exc.start]:02x} at line {line}{hint}: "
                           "save the file as UTF-8") from None


def read(path) -> object:
    """The YAML document of a configuration file, not yet validated: safe constructors only (no
    arbitrary objects), every key once per mapping, one document, at most MAX_EXPANDED_NODES nodes with
    aliases expanded. Raises ChairqmError saying what to change."""
    path = Path(path)
    if not path.is_file():
        raise ChairqmError(f"configuration file not found: {path}")
    try:
        size = path.stat().st_size
        if size > MAX_CONFIG_BYTES:
            raise ChairqmError(f"{path}: {size} bytes; a configuration may be at most {MAX_CONFIG_BYTES} bytes")
        data = path.read_bytes()
    except OSError as exc:
        raise ChairqmError(f"cannot read configuration {path}: {exc.strerror or exc}") from None
    text = _decode(path, data)
    if "\x00" in text:
        raise ChairqmError(f"{path}: contains NUL characters (UTF-16 without a byte-order mark?): save it as UTF-8")
    try:
        loader = _StrictLoader(text)
        try:
            node = loader.get_single_node()
            if node is not None:
                n = _expanded_size(node, {})
                if n > MAX_EXPANDED_NODES:
                    raise ChairqmError(f"{path}: its anchors and aliases (&name / *name) expand to {n} YAML nodes, "
                                       f"more than {MAX_EXPANDED_NODES}: write the configuration out without "
                                       "nested aliases")
            return loader.construct_document(node) if node is not None else None
        finally:
            loader.dispose()
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise ChairqmError(f"{path}: not valid YAML{where}: {problem}") from None
    except RecursionError:
        raise ChairqmError(f"{path}: nested too deeply to be a configuration") from None


def load(path) -> dict:
    """Load and validate a YAML configuration file (see :func:`read`)."""
    path = Path(path)
    cfg = read(path)
    out = validate(cfg, base_dir=path.parent)
    out["_config_path"] = str(path.resolve())
    return out
