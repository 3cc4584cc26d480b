"""Reading and checking a grid configuration before anything runs.

Two passes: the JSON Schema in ``workflow/schemas/config.schema.yaml`` (types, ranges, unknown keys),
then the checks only Cantera can make (the mechanism loads, species exist, compositions parse).
Every failure is an :class:`~sigmagrid.errors.InputError` naming the field.
"""

from __future__ import annotations

import copy
import hashlib
import json
import math
import re
from importlib import resources
from pathlib import Path
from typing import Any

import jsonschema
import yaml

from .errors import InputError

DEFAULTS: dict[str, Any] = {
    "study": "",
    "stop": {"max_time": 10.0, "isothermal_max_time": 1e6, "progress_tolerance": 1e-8, "ignition_rise": 50.0},
    "solver": {"rtol": 1e-10, "atol": 1e-20, "max_steps": 200_000},
    "reactor_volume": 1e-3,
    "storage": {"max_samples": 500, "max_bytes": 16e6, "compression": "zlib"},
    "batch": {"cases_per_job": 8, "max_cases": 20_000},
    "sea": {"enabled": True},
    "progress_grid": {"points": 101},
    "reduction": {"criteria": ["local", "drg", "drgep", "drgep-sieve"], "thresholds": [0.0, 0.001, 0.01, 0.1],
                  "species_thresholds": [0.1, 0.6, 0.9], "thresholds_by_criterion": {},
                  "targets": [], "sieve_share": 1e-3, "negligible": 1e-3,
                  "negative_entropy": "keep", "keep_species": [], "validate": True, "validation_cases": {},
                  "max_ignition_delay_error": 0.05, "max_equilibrium_temperature_error": 2.0,
                  "max_entropy_produced_error": 0.02},
    # 8 cases spread over the grid (corners included) get per-case figures unless asked: the grid
    # figures show every case, and drawing is most of a small run's time (0.85 s a figure)
    "figures": {"cases": 8, "top_reactions": 6, "ranking_top": 12},
}


class _Loader(yaml.SafeLoader):
    """YAML 1.1 reads 1e-8 as a string; people mean a number. Resolve floats as YAML 1.2 does.

    Aliases (``*name``) are refused: a config never needs them, and nested ones can expand to
    billions of nodes.
    """

    def compose_node(self, parent, index):
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            raise yaml.constructor.ConstructorError(None, None, "aliases (*name) are not allowed in a config",
                                                    event.start_mark)
        return super().compose_node(parent, index)


_Loader.add_implicit_resolver(
    "tag:yaml.org,2002:float",
    re.compile(r"""^(?:[-+]?(?:[0-9][0-9_]*)\.[0-9_]*(?:[eE][-+]?[0-9]+)?
    |[-+]?(?:[0-9][0-9_]*)(?:[eE][-+]?[0-9]+)
    |\.[0-9_]+(?:[eE][-+]?[0-9]+)?
    |[-+]?\.(?:inf|Inf|INF)
    |\.(?:nan|NaN|NAN))$""", re.X),
    list("-+0123456789."),
)


def read_yaml(text: str, source: str = ""):
    """Parse YAML text; with ``source`` (a file name for the message) errors become InputError."""
    if not source:
        return yaml.load(text, Loader=_Loader)  # noqa: S506 - a SafeLoader subclass
    try:
        return yaml.load(text, Loader=_Loader)  # noqa: S506
    except yaml.YAMLError as err:
        raise InputError("config file", f"{source} is not valid YAML: {' '.join(str(err).split())}") from None
    except RecursionError:
        raise InputError("config file", f"{source} is nested too deeply to be a config") from None


def schema() -> dict:
    """The config's JSON Schema (shipped with the package, the same file as workflow/schemas)."""
    text = resources.files("sigmagrid").joinpath("schema/config.schema.yaml").read_text()
    return read_yaml(text)


def _field_path(error: jsonschema.ValidationError) -> str:
    path = ""
    for part in error.absolute_path:
        path += f"[{part}]" if isinstance(part, int) else (f".{part}" if path else str(part))
    return path or "config"


def _describe(error: jsonschema.ValidationError) -> tuple[str, str]:
    """A field name and a message a person can act on, for one schema violation."""
    field = _field_path(error)
    sch, val = error.schema, error.instance
    kind = error.validator
    if kind == "additionalProperties":
        allowed = sorted(sch.get("properties", {}))
        extra = sorted(set(val) - set(allowed)) if isinstance(val, dict) else []
        where = f"{field}." if field != "config" else ""
        return (f"{where}{extra[0]}" if extra else field,
                f"unknown key{'s' if len(extra) > 1 else ''} {', '.join(map(repr, extra))}; allowed keys: {', '.join(allowed)}")
    if kind == "required":
        missing = [k for k in sch.get("required", []) if isinstance(val, dict) and k not in val]
        where = f"{field}." if field != "config" else ""
        return f"{where}{missing[0] if missing else '?'}", "is required but missing"
    if kind == "enum":
        return field, f"{val!r} is not allowed; allowed values: {', '.join(map(str, sch['enum']))}"
    if kind == "type":
        return field, f"must be of type {sch['type']}, got {type(val).__name__} {val!r}"
    if kind in ("exclusiveMinimum", "minimum", "exclusiveMaximum", "maximum"):
        sign = {"exclusiveMinimum": ">", "minimum": ">=", "exclusiveMaximum": "<", "maximum": "<="}[kind]
        return field, f"must be {sign} {sch[kind]}, got {val!r}"
    if kind == "minItems":
        return field, f"must list at least {sch['minItems']} value(s); it is empty"
    if kind == "uniqueItems":
        return field, f"lists a value twice: {val!r}"
    if kind in ("anyOf", "oneOf") and "description" in sch:
        return field, f"{val!r} is not allowed; {sch['description']}"
    if kind in ("minLength", "pattern"):
        return field, f"{val!r} is not a valid value ({error.message})"
    return field, error.message


def _non_finite(node: Any, path: str = "config") -> list[tuple[str, str]]:
    """(field, message) of every NaN or infinity: YAML reads .nan and .inf as floats, and the
    schema's ranges do not catch NaN."""
    if isinstance(node, float) and not math.isfinite(node):
        return [(path, f"must be a finite number, got {node!r}")]
    found = []
    if isinstance(node, dict):
        for key, value in node.items():
            found += _non_finite(value, f"{path}.{key}" if path != "config" else str(key))
    elif isinstance(node, list):
        for i, value in enumerate(node):
            found += _non_finite(value, f"{path}[{i}]")
    return found


_FLOAT_TEXT = re.compile(r"^[-+]?(?:\d+\.?\d*|\.\d+)[eE][-+]?\d+$")


def _numbers_from_text(node: Any, key: str = "") -> Any:
    # Loaders that follow YAML 1.1 (Snakemake's among them) leave 1e-8 as text.
    if isinstance(node, str) and key not in ("study", "name", "composition", "fuel", "oxidizer", "mechanism", "phase",
                                                                "thermo", "transport") \
            and _FLOAT_TEXT.match(node.strip()):
        return float(node)
    if isinstance(node, dict):
        return {k: _numbers_from_text(v, k) for k, v in node.items()}
    if isinstance(node, list):
        return [_numbers_from_text(v, key) for v in node]
    return node


#: Most values (keys, list items, leaves) a config may hold; shared references count every time.
MAX_CONFIG_NODES = 200_000


def _node_count(node: Any) -> int:
    """Values in a nested config, counted without recursion and stopping past the limit."""
    count, stack = 0, [node]
    while stack and count <= MAX_CONFIG_NODES:
        item = stack.pop()
        count += 1
        if isinstance(item, dict):
            stack.extend(item.values())
            count += len(item)
        elif isinstance(item, list):
            stack.extend(item)
    return count


def problems(raw: Any) -> list[tuple[str, str]]:
    """Every (field, message) wrong with a config mapping, in the order ``validate`` reports
    them; empty if it is valid."""
    if not isinstance(raw, dict):
        return [("config", f"must be a mapping of keys to values, got {type(raw).__name__}")]
    if _node_count(raw) > MAX_CONFIG_NODES:
        return [("config", f"holds more than {MAX_CONFIG_NODES} values (repeated references?); "
                 "a grid config lists a few axes")]
    try:
        raw = _numbers_from_text(raw)
        found = _non_finite(raw)
    except RecursionError:
        return [("config", "is nested too deeply to be a config")]
    validator = jsonschema.Draft202012Validator(schema())
    errors = sorted(validator.iter_errors(raw), key=lambda e: (len(list(e.absolute_path)), str(e.absolute_path)))
    found += [_describe(error) for error in errors]
    if "feed" not in raw and "compositions" not in raw:
        found.append(("feed", "give a feed (fuel, oxidizer, equivalence_ratio) or a list of compositions"))
    unique = []
    for item in found:  # a bad value can break several schema rules at once
        if item not in unique:
            unique.append(item)
    return unique


def validate(raw: Any) -> dict:
    """Schema-check a config mapping and fill in the defaults. Raises InputError (the first of
    :func:`problems`)."""
    found = problems(raw)
    if found:
        raise InputError(*found[0])
    raw = _numbers_from_text(raw)
    merged = copy.deepcopy(DEFAULTS)
    for key, value in raw.items():
        if isinstance(value, dict) and isinstance(merged.get(key), dict):
            merged[key].update(value)
        else:
            merged[key] = copy.deepcopy(value)
    return merged


def load(path: str | Path) -> dict:
    """Read a YAML config file and validate it."""
    return validate(read_yaml(read_config_text(path), f"'{path}'"))


#: Largest accepted config file, bytes (a grid config is a few hundred bytes).
MAX_CONFIG_BYTES = 1024 * 1024


def read_config_text(path: str | Path) -> str:
    """The text of a config file; a missing, special, huge or non-UTF-8 file is an InputError."""
    path = Path(path)
    if not path.exists():
        raise InputError("config file", f"'{path}' does not exist")
    if not path.is_file():
        raise InputError("config file", f"'{path}' is not a regular file")
    if path.stat().st_size > MAX_CONFIG_BYTES:
        raise InputError("config file", f"'{path}' is larger than {MAX_CONFIG_BYTES // 1024} KiB; is it a config?")
    try:
        return path.read_text(encoding="utf-8")
    except UnicodeDecodeError as err:
        raise InputError("config file", f"'{path}' is not UTF-8 text ({err.reason} at byte {err.start})") from None
    except OSError as err:
        raise InputError("config file", f"cannot read '{path}': {err.strerror}") from None


def config_hash(config: dict) -> str:
    """sha256 of the validated config in canonical JSON: the same settings give the same hash.

    The ``figures`` section changes no number, so it is left out.
    """
    config = {k: v for k, v in config.items() if k != "figures"}
    text = json.dumps(config, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()


#: The config keys that change the result of a case (the grid axes change which cases exist).
CASE_SETTINGS = ("stop", "solver", "reactor_volume", "storage", "sea")  # the SEA result is in the case file


def settings_hash(config: dict) -> str:
    """sha256 of the settings of a validated config that shape each case's result; equal hashes,
    reusable case files.

    ``storage.compression`` is left out: the codec changes how the file is packed, not one value
    in it, so a file written with another codec is still a valid result.
    """
    settings = {key: config.get(key) for key in CASE_SETTINGS}
    settings["storage"] = {k: v for k, v in config["storage"].items() if k != "compression"}
    return config_hash(settings)


def cut_name(criterion: str, threshold: float) -> str:
    """File-name stem of a mechanism cut, e.g. ``local-0.001``."""
    return f"{criterion}-{threshold:g}"


def cuts(config: dict) -> list[tuple[str, str, float]]:
    """(name, criterion, threshold) of every cut a validated config asks for, in config order.

    Here rather than in :mod:`sigmagrid.rank` because the workflow needs the names when it is
    parsed, before any job runs: importing the ranking (pandas, xarray) cost 0.4 s of that parse.
    """
    red = config["reduction"]
    return [(cut_name(c, float(t)), c, float(t)) for c in red["criteria"] for t in thresholds_of(red, c)]


#: Criteria that rank species (thresholds from ``reduction.species_thresholds``); the others rank reactions.
SPECIES_CRITERIA = ("drg", "drgep", "drgep-sieve")


def thresholds_of(reduction: dict, criterion: str) -> list[float]:
    """Thresholds (1) of one criterion: ``thresholds_by_criterion`` first, then the species or
    reaction thresholds by the kind of criterion."""
    own = (reduction.get("thresholds_by_criterion") or {}).get(criterion)
    if own:
        return [float(t) for t in own]
    key = "species_thresholds" if criterion in SPECIES_CRITERIA else "thresholds"
    return [float(t) for t in reduction.get(key, DEFAULTS["reduction"][key])]
