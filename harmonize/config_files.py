"""Reading configuration files safely, and checked access to their values.

The project file, the mappings and the vocabulary are YAML written by people: this module reads
them with the safe loader, refuses alias bombs and oversized files, and offers small accessors
that turn a wrong type, an unknown key or a path leaving the project into an error naming the
file and the key. What the keys mean is left to `project`, `mapping_file` and `vocab`.
"""

from __future__ import annotations

import difflib
import os
from collections.abc import Mapping as MappingABC
from pathlib import Path
from typing import Any

import yaml

from harmonize.errors import ConfigError, SourceNotFoundError, UnsafePathError


def check_keys(data: MappingABC, allowed: tuple[str, ...], file: Path, where: str) -> None:
    for key in data:
        if key not in allowed:
            close = difflib.get_close_matches(str(key), allowed, n=1)
            hint = f"did you mean '{close[0]}'?" if close else f"allowed keys: {', '.join(allowed)}"
            raise ConfigError(f"unknown key '{key}' in {where}", file=str(file), hint=hint)


def as_mapping(value: Any, file: Path, where: str) -> dict:
    if value is None:
        return {}
    if not isinstance(value, MappingABC):
        raise ConfigError(
            f"{where} must be a mapping of keys to values, got {type(value).__name__}",
            file=str(file),
        )
    return dict(value)


def as_string(value: Any, file: Path, where: str, *, required: bool = False) -> str | None:
    if value is None:
        if required:
            raise ConfigError(f"missing required key '{where}'", file=str(file))
        return None
    if isinstance(value, bool) or not isinstance(value, (str, int, float)):
        raise ConfigError(f"'{where}' must be text, got {type(value).__name__}", file=str(file))
    return str(value)


def as_choice(value: Any, choices: tuple[str, ...], file: Path, where: str) -> str:
    text = as_string(value, file, where, required=True)
    if text not in choices:
        raise ConfigError(
            f"'{where}' is '{text}'", file=str(file), hint=f"use one of: {', '.join(choices)}"
        )
    return text


def as_number(value: Any, file: Path, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"'{where}' must be a number, got {value!r}", file=str(file))
    return float(value)


def as_count(value: Any, file: Path, where: str) -> int:
    """A whole number of at least 1 (a size or a limit)."""
    number = as_number(value, file, where)
    if number < 1 or number != int(number):
        raise ConfigError(
            f"'{where}' must be a whole number of at least 1, got {value!r}", file=str(file)
        )
    return int(number)


def resolve_inside(root: Path, base: Path, text: str, file: Path, where: str) -> Path:
    """Resolve `text` relative to `base`; refuse URLs and anything whose real path leaves `root`."""
    if "://" in text or text.startswith(("file:", "~", "$")):
        raise UnsafePathError(
            f"'{where}' must be a relative file path, not '{text}'", file=str(file)
        )
    candidate = Path(text)
    if candidate.is_absolute():
        raise UnsafePathError(
            f"'{where}' is an absolute path '{text}'",
            file=str(file),
            hint="paths are relative to the mapping file",
        )
    resolved = Path(os.path.realpath(base / candidate))
    root_real = Path(os.path.realpath(root))
    if resolved != root_real and root_real not in resolved.parents:
        raise UnsafePathError(
            f"'{where}' points outside the project root: '{text}'",
            file=str(file),
            hint="keep sources inside the project folder (symbolic links are followed when checking)",
        )
    return resolved


# A YAML file may repeat a node through anchors and aliases (`&a` ... `*a`); a few lines of
# nested aliases stand for billions of values ("billion laughs"), which `yaml.safe_load` builds
# as shared references that explode once walked. Configuration files are small, so anything
# larger than these bounds is refused before its values are used.
YAML_MAX_BYTES = 1 << 20
YAML_MAX_EXPANDED_NODES = 1_000_000
# libyaml's safe loader reads the vocabulary about 7x faster and caps nesting depth itself
_SAFE_LOADER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


def _expanded_size(root: yaml.Node) -> int:
    """Number of nodes once every alias is written out, counted without writing them out."""
    size: dict[int, int] = {}
    stack: list[tuple[yaml.Node, bool]] = [(root, False)]
    open_nodes: set[int] = set()
    while stack:
        node, children_done = stack.pop()
        key = id(node)
        if key in size:
            continue
        if isinstance(node, yaml.ScalarNode):
            size[key] = 1
            continue
        children = (
            [item for pair in node.value for item in pair]
            if isinstance(node, yaml.MappingNode)
            else list(node.value)
        )
        if children_done:
            open_nodes.discard(key)
            size[key] = 1 + sum(size[id(child)] for child in children)
            if size[key] > YAML_MAX_EXPANDED_NODES:
                return size[key]
            continue
        if key in open_nodes:  # an alias inside its own anchor: endless once written out
            return YAML_MAX_EXPANDED_NODES + 1
        open_nodes.add(key)
        stack.append((node, True))
        for child in children:
            if id(child) in open_nodes:
                return YAML_MAX_EXPANDED_NODES + 1
            stack.append((child, False))
    return size[id(root)]


def parse_yaml(text: str) -> tuple[yaml.Node | None, Any]:
    """Parse YAML with the safe loader (no tags that build objects), refusing alias bombs.

    Returns the composed node (for line numbers) and the data. Raises `yaml.YAMLError`, whose
    `problem` and `problem_mark` name the cause and the line, like any syntax error.
    """
    loader = _SAFE_LOADER(text)
    try:
        node = loader.get_single_node()
        if node is None:
            return None, None
        if _expanded_size(node) > YAML_MAX_EXPANDED_NODES:
            raise yaml.constructor.ConstructorError(
                None,
                None,
                f"anchors and aliases (&name, *name) expand to more than "
                f"{YAML_MAX_EXPANDED_NODES} values or refer to themselves; refused as an alias "
                "bomb: write the values out",
                None,
            )
        return node, loader.construct_document(node)
    except RecursionError:
        raise yaml.YAMLError("nested too deeply to read") from None
    finally:
        loader.dispose()


def read_yaml_text(path: Path, error_class: type[ConfigError] = ConfigError) -> str:
    """The text of a YAML configuration file, refused above YAML_MAX_BYTES or if not UTF-8."""
    try:
        size = path.stat().st_size
        if size > YAML_MAX_BYTES:
            raise error_class(
                f"file is {size} bytes, more than the {YAML_MAX_BYTES} allowed for a YAML file",
                file=str(path),
                hint="configuration files are small; check that this is the intended file",
            )
        return path.read_text(encoding="utf-8")
    except (FileNotFoundError, IsADirectoryError):
        raise SourceNotFoundError.at(path) from None
    except UnicodeDecodeError as error:
        raise error_class(
            f"not UTF-8 text ({error.reason})", file=str(path), hint="save the file as UTF-8"
        ) from None


def load_yaml(path: Path) -> Any:
    text = read_yaml_text(path)
    try:
        return parse_yaml(text)[1]
    except yaml.YAMLError as error:
        mark = getattr(error, "problem_mark", None)
        row = mark.line + 1 if mark is not None else None
        problem = getattr(error, "problem", None) or str(error) or "invalid YAML"
        raise ConfigError(f"invalid YAML: {problem}", file=str(path), row=row) from None


def as_arrhenius_temperature(value: Any, file: Path, where: str) -> float | None:
    if value is None:
        return None
    number = as_number(value, file, where)
    if not 0 < number < 1e5:
        raise ConfigError(
            f"'{where}' must be a temperature in K, e.g. 8000; got {value!r}", file=str(file)
        )
    return number
