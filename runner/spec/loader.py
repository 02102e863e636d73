"""Reading a spec file: the line-tracking YAML loader, and every problem with its line.

:func:`load_spec` reads a spec file and returns a frozen :class:`~runner.spec.models.Spec`,
or raises :class:`~runner.errors.InputError` carrying every problem it found, each with
the file, the line, the dotted key path and the offending value. The file is composed
with a YAML loader derived from ``yaml.SafeLoader`` (no object construction); only
``true``/``false`` are booleans (so a key ``on`` stays the text ``on``) and dates stay
text. :func:`load_spec_dict` checks a spec given as a mapping (the Python API's dict
spec) by passes 2 and 3 below, with the same messages (and no lines).

Checking runs in three passes, all of whose problems are reported together:

1. the YAML node tree: syntax, duplicate keys, tags that have no place in a spec;
2. the models (:mod:`runner.spec.models`): unknown keys (with a "did you mean"), types,
   ranges, allowed values; pydantic's errors become problems here;
3. rules across keys (:mod:`runner.spec.rules`).

A pass-3 rule runs only when none of the key paths it reads failed pass 2, so one broken
key never hides the problems of unrelated ones.

Composition. A spec that names a base (``extends: _base.yaml``, relative to the spec) is
merged over it before the passes: mappings key by key, lists and values replaced; bases
may chain up to ``MAX_EXTENDS_DEPTH`` files, a cycle is refused naming its files. The line
map then holds, per key path, the line and (for keys a base gave) the base's file, so a
problem points at the file the value came from. A base's ``dataset.path`` is rewritten
relative to the extending spec (paths are relative to the file they are written in).

Variation. A spec with ``vary`` gets one spec per combination (keys sorted, values in
order, the last key fastest), each built from the raw data and put through the same
passes; a problem of a combination points at the value that caused it
(``vary.<key>.<index>``).
"""

from __future__ import annotations

import copy
import difflib
import itertools
import json
import os
import re
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Literal, get_args, get_origin

import yaml
from pydantic import BaseModel, ValidationError

from runner.errors import InputError, Problem
from runner.files import special_file_kind
from runner.spec.models import (
    MAX_EXTENDS_DEPTH,
    OPTIONAL_SECTIONS,
    PATTERN_HINTS,
    Combination,
    Spec,
    bare_type,
    locate,
)
from runner.spec.rules import Where, overlaps, rule_problems, vary_key_problems

_MAX_NODES = 200_000

#: Largest spec file read (bytes); a larger one is refused by its size, unread.
MAX_SPEC_BYTES = 1 << 20


# --------------------------------------------------------------------------- public API


def load_spec(path: str | Path) -> Spec:
    """Read and check a spec file; raise InputError with every problem found in it.

    A spec that ``extends`` a base spec is merged over it first (:func:`_composed`):
    problems point at the file and line each value came from."""
    file = str(path)
    tree = _composed(Path(path), file, ())
    if not isinstance(tree.data, dict):
        raise InputError(tree.problems)
    if tree.problems and any(p.key == EXTENDS_KEY for p in tree.problems):
        raise InputError(_sorted_problems(tree.problems))
    return _checked(tree, Path(path).resolve())


#: How a spec given as a mapping (:func:`load_spec_dict`) is named in messages and records.
DICT_ORIGIN = "<dict>"


def load_spec_dict(data: Mapping[str, Any], origin: str = DICT_ORIGIN,
                   base: str | Path | None = None) -> Spec:
    """Check a spec given as a mapping, as :func:`load_spec` checks a file.

    ``data`` is what a spec file would parse to (nested mappings and lists of text,
    numbers, booleans and None; tuples count as lists, paths as text, numpy scalars as
    numbers). It goes through the same models and cross-key rules, so every problem has
    the same message and key as in a file; problems name ``origin`` and have no line.

    Parameters
    ----------
    data
        The spec as plain data; it is not modified.
    origin
        How messages and the run record name the spec (default ``<dict>``).
    base
        The folder relative paths (``dataset.path``) resolve against; default: the
        current folder at the time of the call.

    Returns
    -------
    Spec
        The validated spec.

    Raises
    ------
    InputError
        With every problem found (``partial_spec`` set as :func:`load_spec` sets it).
    """
    tree = _Tree(origin)
    if not isinstance(data, Mapping):
        raise InputError(Problem(origin, "the top level of a spec must be a mapping of keys",
                                 value=_shown(data)))
    if not data:
        raise InputError(Problem(origin, "the spec is empty; it needs at least 'name' and "
                                         "'dataset'"))
    tree.data = _plain(data, (), tree, frozenset())
    folder = Path.cwd() if base is None else Path(base)
    return _checked(tree, (folder / origin).resolve())


#: A rule's reference to the line of another key (``(tiers.0.0, line 4)``) when the key
#: has no line: always in a spec given as a mapping.
_LINE_REFERENCE = re.compile(r" \(line None\)|, line None")


def _lineless(problem: Problem) -> Problem:
    """The problem without references to lines that do not exist."""
    return replace(problem, message=_LINE_REFERENCE.sub("", problem.message))


def _plain(value: Any, path: tuple[str, ...], tree: _Tree, active: frozenset[int]) -> Any:
    """A mapping spec's value as the YAML loader would give it: dicts with text keys,
    lists, and scalars (tuples as lists, paths as text, numpy scalars as numbers)."""
    key = ".".join(path) or None
    if isinstance(value, Mapping | list | tuple):
        if id(value) in active:
            tree.problems.append(Problem(tree.file, "the spec contains itself", key=key))
            tree.refused.add(key or "")
            return None
        inner = active | {id(value)}
        if not isinstance(value, Mapping):
            return [_plain(item, (*path, str(i)), tree, inner) for i, item in enumerate(value)]
        out: dict[str, Any] = {}
        for name, item in value.items():
            if isinstance(name, bool) or not isinstance(name, str | int | float):
                tree.problems.append(Problem(tree.file, "a key must be plain text, not a list "
                                             "or mapping", key=key))
                continue
            out[str(name)] = _plain(item, (*path, str(name)), tree, inner)
        return out
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if type(value).__module__ == "numpy" and hasattr(value, "item"):
        return value.item()
    return value


def _checked(tree: _Tree, source: Path) -> Spec:
    """The spec of a parsed tree, checked by the models and the cross-key rules (pass 2
    and 3); raise InputError with every problem (the tree's own ones too)."""
    file = tree.file
    spec, problems = _validate(tree.data, tree.lines, file, tree.origins)
    problems = [p for p in problems if not _inside_any(p.key or "", tree.refused)]
    all_problems = _sorted_problems([_lineless(p) for p in tree.problems + problems])
    partial = spec if spec is not None else _partial_spec(
        tree.data, frozenset(p.key or "" for p in all_problems))
    if partial is not None:
        partial.attach_source(source, file, tree.lines, all_problems, tree.origins)
        for combination in partial.combinations:
            combination.spec.attach_source(source, file, tree.lines, [], tree.origins)
    if spec is None or any(p.severity == "error" for p in all_problems):
        error = InputError(all_problems)
        # The parts that passed, so callers can still check the data and the names in it.
        dataset_ok = not any(overlaps("dataset", p.key or "") or not p.key
                             for p in all_problems if p.severity == "error")
        error.partial_spec = partial if dataset_ok else None
        raise error
    return spec


# --------------------------------------------------------------------------- reading YAML


BOOL_TAG = "tag:yaml.org,2002:bool"
TIMESTAMP_TAG = "tag:yaml.org,2002:timestamp"
FLOAT_TAG = "tag:yaml.org,2002:float"
NULL_TAG = "tag:yaml.org,2002:null"
_PLAIN_TAGS = frozenset(f"tag:yaml.org,2002:{t}" for t in
                        ("str", "int", "float", "bool", "null", "map", "seq"))


class _SpecLoader(yaml.SafeLoader):
    """SafeLoader, YAML 1.2 style: only true/false are booleans, dates stay text, and 1e-9
    is a number."""


_SpecLoader.yaml_implicit_resolvers = {
    first: [(tag, rx) for tag, rx in resolvers if tag not in (BOOL_TAG, TIMESTAMP_TAG)]
    for first, resolvers in yaml.SafeLoader.yaml_implicit_resolvers.items()
}
_SpecLoader.add_implicit_resolver(
    BOOL_TAG, re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$"), list("tTfF"))
_SpecLoader.add_implicit_resolver(  # 1e-9 is a number too, not only 1.0e-9
    FLOAT_TAG, re.compile(r"^[-+]?[0-9][0-9_]*(?:\.[0-9_]*)?[eE][-+]?[0-9]+$"),
    list("-+0123456789"))



def _read_text(path: Path, file: str) -> tuple[str | None, list[Problem]]:
    """The spec's text, once ``os.stat`` shows a regular file within :data:`MAX_SPEC_BYTES`:
    a folder, a device or a FIFO is refused before it is opened (a FIFO would block the
    open, ``/dev/zero`` never ends), and so is a larger file, before it is read."""
    try:
        kind = special_file_kind(os.stat(path).st_mode)
        if kind is not None:
            return None, [Problem(file, f"is {kind}, not a spec file")]
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
        with os.fdopen(fd, "rb", buffering=0) as handle:
            info = os.fstat(fd)
            kind = special_file_kind(info.st_mode)
            if kind is not None:
                return None, [Problem(file, f"is {kind}, not a spec file")]
            parts: list[bytes] = []
            left = 0 if info.st_size > MAX_SPEC_BYTES else MAX_SPEC_BYTES + 1
            while left > 0 and (part := handle.read(left)):
                parts.append(part)
                left -= len(part)
            raw = b"".join(parts)
            size = max(info.st_size, len(raw))
    except FileNotFoundError:
        return None, [Problem(file, "no such spec file")]
    except PermissionError:
        return None, [Problem(file, "the spec file cannot be read: permission denied")]
    except OSError as exc:
        return None, [Problem(file, f"the spec file cannot be read: {exc.strerror or exc}")]
    if size > MAX_SPEC_BYTES:
        return None, [Problem(file, f"the spec file is {size:,} bytes, more than the limit of "
                              f"{MAX_SPEC_BYTES:,} bytes (1 MiB); a spec is a short YAML file")]
    try:
        return raw.decode("utf-8-sig"), []
    except UnicodeDecodeError as exc:
        return None, [Problem(file, f"the spec file is not UTF-8 text (byte {exc.start})")]

def _compose(text: str, file: str) -> tuple[yaml.Node | None, list[Problem]]:
    try:
        return yaml.compose(text, Loader=_SpecLoader), []
    except yaml.MarkedYAMLError as exc:
        return None, [_yaml_problem(exc, file)]
    except yaml.reader.ReaderError as exc:
        return None, [_reader_problem(exc, text, file)]
    except yaml.YAMLError as exc:
        return None, [Problem(file, f"not valid YAML: {exc}")]
    except RecursionError:
        return None, [Problem(file, "not a usable spec: the YAML is nested too deeply")]

def _yaml_problem(exc: yaml.MarkedYAMLError, file: str) -> Problem:
    mark = exc.problem_mark or exc.context_mark
    problem = exc.problem or "cannot be parsed"
    context = exc.context or ""
    if exc.context_mark is not None and exc.context_mark is not mark and context:
        context += f" at line {exc.context_mark.line + 1}"
    if not context:
        message = problem
    elif context.startswith("while"):
        message = f"{problem} ({context})"
    else:
        message = f"{context}, {problem}"
    if mark is not None:
        message += f", column {mark.column + 1}"
    return Problem(file, "YAML syntax error: " + message,
                   line=None if mark is None else mark.line + 1)

def _reader_problem(exc: yaml.reader.ReaderError, text: str, file: str) -> Problem:
    line = text[: exc.position].count("\n") + 1 if isinstance(exc.position, int) else None
    code = exc.character if isinstance(exc.character, int) else ord(str(exc.character)[:1] or "?")
    return Problem(file, f"the file holds a character YAML does not allow (U+{code:04X})",
                   line=line)


@dataclass
class _Tree:
    """Plain data built from a composed YAML node tree, with key lines and problems."""

    file: str
    data: Any = None
    lines: dict[str, int] = field(default_factory=dict)
    problems: list[Problem] = field(default_factory=list)
    nodes: int = 0
    refused: set[str] = field(default_factory=set)
    #: key path -> the file it came from, for keys merged in from a base spec (the others
    #: come from ``file``); with ``lines``, a map from key paths to (file, line).
    origins: dict[str, str] = field(default_factory=dict)

    def refuse(self, message: str, line: int, key: str | None) -> None:
        """Record a problem with a node; its value becomes null and is not reported again."""
        self.problems.append(Problem(self.file, message, line=line, key=key))
        self.refused.add(key or "")


def _build_tree(root: yaml.Node, file: str) -> _Tree:
    tree = _Tree(file)
    constructor = yaml.constructor.SafeConstructor()
    try:
        tree.data = _node_data(root, (), tree, constructor, frozenset())
    except RecursionError:
        tree.problems.append(Problem(file, "not a usable spec: the YAML is nested too deeply"))
    return tree


def _node_data(node: yaml.Node, path: tuple[str, ...], tree: _Tree,
               constructor: yaml.constructor.SafeConstructor,
               active: frozenset[int]) -> Any:
    tree.nodes += 1
    line = node.start_mark.line + 1
    key = ".".join(path) or None
    if tree.nodes > _MAX_NODES:
        if tree.nodes == _MAX_NODES + 1:
            tree.refuse("the spec is too large once its aliases are expanded", line, key)
        return None
    if id(node) in active:
        tree.refuse("an alias refers to itself", line, key)
        return None
    if node.tag not in _PLAIN_TAGS:
        tree.refuse(f"the YAML tag '{node.tag}' has no place in a spec; write plain values",
                    line, key)
        return None
    inner = active | {id(node)}
    if isinstance(node, yaml.MappingNode):
        return _mapping_data(node, path, tree, constructor, inner)
    if isinstance(node, yaml.SequenceNode):
        items = []
        for index, item in enumerate(node.value):
            tree.lines[".".join((*path, str(index)))] = item.start_mark.line + 1
            items.append(_node_data(item, (*path, str(index)), tree, constructor, inner))
        return items
    try:
        return constructor.construct_object(node, deep=True)
    except (yaml.YAMLError, ValueError) as exc:
        tree.refuse(f"unreadable value {node.value!r}: {exc}", line, key)
        return None


def _mapping_data(node: yaml.MappingNode, path: tuple[str, ...], tree: _Tree,
                  constructor: yaml.constructor.SafeConstructor,
                  active: frozenset[int]) -> dict[str, Any]:
    result: dict[str, Any] = {}
    first_line: dict[str, int] = {}
    for key_node, value_node in node.value:
        line = key_node.start_mark.line + 1
        if not isinstance(key_node, yaml.ScalarNode):
            tree.problems.append(Problem(tree.file, "a key must be plain text, not a list or "
                                         "mapping", line=line, key=".".join(path) or None))
            continue
        name = str(key_node.value)
        dotted = ".".join((*path, name))
        if name in first_line:
            tree.problems.append(Problem(
                tree.file, f"duplicate key '{name}'; it is first given at line "
                f"{first_line[name]}", line=line, key=dotted))
            continue
        first_line[name] = line
        tree.lines[dotted] = line
        result[name] = _node_data(value_node, (*path, name), tree, constructor, active)
    return result


# --------------------------------------------------------------------------- extends


#: The key naming a base spec, and how many bases deep a chain may go (a spec, its base,
#: the base's base, ...: at most this many base files).
EXTENDS_KEY = "extends"
#: Keys that hold a path relative to the file they are written in; a base's value is
#: rewritten relative to the spec that extends it when merged.
PATH_KEYS = (("dataset", "path"),)


def _single_tree(path: Path, file: str) -> _Tree:
    """One YAML file as a tree (no ``extends`` resolved); data None with its problems."""
    text, problems = _read_text(path, file)
    if text is None:
        return _Tree(file, problems=problems)
    root, problems = _compose(text, file)
    if problems:
        return _Tree(file, problems=problems)
    if root is None or (isinstance(root, yaml.ScalarNode) and root.tag == NULL_TAG):
        return _Tree(file, problems=[Problem(file, "the spec is empty; it needs at least "
                                             "'name' and 'dataset'")])
    tree = _build_tree(root, file)
    if not isinstance(tree.data, dict):
        if not tree.problems:
            tree.problems.append(Problem(file, "the top level of a spec must be a mapping of "
                                         "keys", line=root.start_mark.line + 1,
                                         value=_shown(tree.data)))
        tree.data = None
    return tree


def _composed(path: Path, file: str, chain: tuple[tuple[Path, str], ...]) -> _Tree:
    """A spec file with its ``extends`` chain merged under it: mappings merged key by key,
    anything else (lists, values) replaced by the extending file's. ``chain`` holds the
    files that extend this one (resolved path, name as shown), for cycles and depth."""
    tree = _single_tree(path, file)
    if not isinstance(tree.data, dict) or EXTENDS_KEY not in tree.data:
        return tree
    given = tree.data.pop(EXTENDS_KEY)
    line = tree.lines.get(EXTENDS_KEY)
    if given is None:
        return tree
    if not isinstance(given, str) or not given.strip():
        tree.problems.append(Problem(file, "must be the path of a base spec file, relative "
                                     "to this one", line=line, key=EXTENDS_KEY,
                                     value=_shown(given)))
        return tree
    here = (*chain, (path.resolve(), file))
    base_path = path.parent / given
    base_file = str(Path(file).parent / given)
    seen = {resolved: shown for resolved, shown in here}
    if base_path.resolve() in seen:
        cycle = " -> ".join([shown for _, shown in here] + [base_file])
        tree.problems.append(Problem(file, f"{given!r} leads back to "
                                     f"{seen[base_path.resolve()]}: a cycle of bases "
                                     f"({cycle}) is refused",
                                     line=line, key=EXTENDS_KEY, value=given))
        return tree
    if len(here) > MAX_EXTENDS_DEPTH:
        tree.problems.append(Problem(file, f"too many bases: a spec may extend at most "
                                     f"{MAX_EXTENDS_DEPTH} base files in a chain",
                                     line=line, key=EXTENDS_KEY, value=given))
        return tree
    base = _composed(base_path, base_file, here)
    if not isinstance(base.data, dict):
        tree.problems += [p if p.line is not None or p.file != base_file else Problem(
            file, f"extends {given!r}: {p.message}", line=line, key=EXTENDS_KEY, value=given)
            for p in base.problems]
        return tree
    _rebase_paths(base, path.parent, base_path.parent)
    return _merged(base, tree)


def _rebase_paths(base: _Tree, child_dir: Path, base_dir: Path) -> None:
    """Paths a base spec gives are relative to the base file: rewrite them relative to
    the extending spec's folder (the merged spec is that spec's)."""
    if child_dir.resolve() == base_dir.resolve():
        return
    for keys in PATH_KEYS:
        holder: Any = base.data
        for part in keys[:-1]:
            holder = holder.get(part) if isinstance(holder, dict) else None
        if isinstance(holder, dict) and isinstance(holder.get(keys[-1]), str):
            target = base_dir / holder[keys[-1]]
            holder[keys[-1]] = Path(os.path.relpath(target, child_dir)).as_posix()


def _merged(base: _Tree, child: _Tree) -> _Tree:
    """``child`` over ``base``: the data, the key lines with the file each came from, the
    problems and refused keys of both."""
    out = _Tree(child.file, problems=base.problems + child.problems,
                refused=base.refused | child.refused, nodes=base.nodes + child.nodes)

    def origin_of(tree: _Tree, key: str) -> str:
        return tree.origins.get(key, tree.file)

    def take(tree: _Tree, prefix: str) -> None:
        for key, line in tree.lines.items():
            if key == prefix or key.startswith(prefix + "."):
                out.lines[key] = line
                if origin_of(tree, key) != child.file:
                    out.origins[key] = origin_of(tree, key)

    def merge(low: dict[str, Any], high: dict[str, Any], path: str) -> dict[str, Any]:
        result: dict[str, Any] = {}
        for name in [*low, *(k for k in high if k not in low)]:
            key = f"{path}.{name}" if path else name
            if name in high and isinstance(high[name], dict) and isinstance(low.get(name), dict):
                take(child, key)  # the mapping's own line is the extending file's
                result[name] = merge(low[name], high[name], key)
            elif name in high:
                take(child, key)
                result[name] = high[name]
            else:
                take(base, key)
                result[name] = low[name]
        return result

    out.data = merge(base.data, child.data, "")
    return out


# --------------------------------------------------------------------------- vary


def _expand_vary(spec: Spec, data: dict[str, Any], lines: dict[str, int], file: str,
                 origins: dict[str, str]) -> list[Problem]:
    """The specs of ``vary``'s combinations, each validated like any spec (attached to
    ``spec``); a problem of a combination points at the value that caused it."""
    where = Where(file, lines, data, origins)
    problems = vary_key_problems(spec, where)
    if problems:
        return problems
    vary = spec.vary or {}
    keys = sorted(vary)
    combos: list[Combination] = []
    found: list[Problem] = []
    base = {k: v for k, v in data.items() if k not in ("vary", "vary_limit")}
    for picks in itertools.product(*(range(len(vary[k])) for k in keys)):
        values = {k: vary[k][i] for k, i in zip(keys, picks, strict=True)}
        combo = copy.deepcopy(base)
        for key, value in values.items():
            _set_path(combo, key.split("."), copy.deepcopy(value))
        label = ", ".join(f"{k}={json.dumps(v)}" for k, v in values.items())
        made, issues = _validate(combo, lines, file, origins)
        errors = [p for p in issues if p.severity == "error"]
        for p in errors:
            culprit = next((k for k in keys if overlaps(k, p.key or "")), None)
            at = f"vary.{culprit}.{picks[keys.index(culprit)]}" if culprit else "vary"
            shown = (f"{culprit}={json.dumps(values[culprit])}" if culprit else label)
            where_file, line = locate(lines, origins, file, at)
            found.append(Problem(where_file, f"with {shown}: {p.key}: {p.message}", line=line,
                                 key=at, value=p.value))
        if made is not None and not errors:
            combos.append(Combination(values, made))
    if found:
        return _dedupe(found)
    spec.attach_combinations(tuple(combos))
    return []


def _set_path(data: dict[str, Any], parts: list[str], value: Any) -> None:
    """Set a dotted key path in plain data, making the mappings on the way."""
    current = data
    for part in parts[:-1]:
        if not isinstance(current.get(part), dict):
            current[part] = {}
        current = current[part]
    current[parts[-1]] = value


# --------------------------------------------------------------------------- pass 2: models


def _validate(data: dict[str, Any], lines: dict[str, int], file: str,
              origins: dict[str, str] | None = None) -> tuple[Spec | None, list[Problem]]:
    origins = origins or {}
    try:
        spec = Spec.model_validate(data)
    except ValidationError as exc:
        problems = _dedupe(_model_problem(err, data, lines, file, origins)
                           for err in exc.errors())
    else:
        problems = rule_problems(spec, data, lines, file, frozenset(), origins)
        if spec.vary is not None and not any(p.severity == "error" for p in problems):
            problems += _expand_vary(spec, data, lines, file, origins)
        return spec, problems
    broken = frozenset(p.key or "" for p in problems)
    partial = _partial_spec(data, broken)
    if partial is not None:
        problems += rule_problems(partial, data, lines, file, broken, origins)
    return None, problems


def _partial_spec(data: dict[str, Any], broken: frozenset[str]) -> Spec | None:
    """A spec from the parts that passed: broken keys dropped (defaults apply), stand-ins for
    broken required keys. Rules only read it where none of their keys are broken."""
    good = copy.deepcopy(data)
    for key in broken:
        _drop(good, key.split(".") if key else [])
    for section in OPTIONAL_SECTIONS:  # a broken section goes whole
        if any(overlaps(section, key) for key in broken):
            good.pop(section, None)
    good.setdefault("name", "stand-in")
    if not isinstance(good.get("dataset"), dict):
        good["dataset"] = {}
    good["dataset"].setdefault("path", ".")
    try:
        return Spec.model_validate(good)
    except ValidationError:
        return None


def _drop(data: Any, parts: list[str]) -> None:
    """Delete the innermost mapping key on an existing path (a list item drops its list)."""
    current, last = data, None
    for part in parts:
        if isinstance(current, dict) and part in current:
            last = (current, part)
            current = current[part]
        elif isinstance(current, list) and part.isdigit() and int(part) < len(current):
            current = current[int(part)]
        else:
            return
    if last is not None:
        del last[0][last[1]]


def _inside_any(key: str, roots: set[str]) -> bool:
    """Whether a key path is one of ``roots`` or below one of them."""
    return any(not root or key == root or key.startswith(root + ".") for root in roots)


def _model_problem(err: Any, data: Any, lines: dict[str, int], file: str,
                   origins: dict[str, str]) -> Problem:
    path = _clean_loc(err["loc"], data, err["type"] == "missing")
    key = ".".join(path) or None
    kind = err["type"]
    value = None if kind in ("missing", "extra_forbidden") else _shown(err.get("input"))
    where, line = locate(lines, origins, file, key or "")
    return Problem(where, _model_message(err, path), line=line, key=key, value=value)


def _clean_loc(loc: tuple[Any, ...], data: Any, missing: bool) -> tuple[str, ...]:
    """Keep the parts of a pydantic location that name keys or list items of the data."""
    out: list[str] = []
    current = data
    for index, part in enumerate(loc):
        if isinstance(current, dict) and isinstance(part, str) and part in current:
            current = current[part]
        elif isinstance(current, list) and isinstance(part, int) and 0 <= part < len(current):
            current = current[part]
        elif not (missing and index == len(loc) - 1):
            continue
        out.append(str(part))
    return tuple(out)


def _model_message(err: Any, path: tuple[str, ...]) -> str:
    kind, ctx = err["type"], err.get("ctx") or {}
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return _unknown_key_message(path)
    if kind == "literal_error":
        return _choice_message(path, err.get("input"))
    fixed = {
        "int_type": "must be a whole number", "float_type": "must be a number",
        "string_type": "must be text (quote it if it looks like a number or null)",
        "bool_type": "must be true or false", "list_type": "must be a list",
        "dict_type": "must be a mapping of keys", "model_type": "must be a mapping of keys",
        "finite_number": "must be a finite number",
    }
    if kind in fixed:
        return fixed[kind]
    bounds = {"greater_than_equal": ("ge", "must be at least"),
              "greater_than": ("gt", "must be greater than"),
              "less_than_equal": ("le", "must be at most"),
              "less_than": ("lt", "must be less than")}
    if kind in bounds:
        name, text = bounds[kind]
        return f"{text} {ctx.get(name)}"
    if kind == "string_pattern_mismatch":
        pattern = str(ctx.get("pattern", ""))
        return PATTERN_HINTS.get(pattern, f"must match the pattern {pattern}")
    if kind in ("too_short", "string_too_short"):
        return _length_message("at least", ctx.get("min_length"), kind)
    if kind in ("too_long", "string_too_long"):
        return _length_message("at most", ctx.get("max_length"), kind)
    message = str(err.get("msg", "is not valid"))
    return message.removeprefix("Value error, ")


def _length_message(bound: str, count: Any, kind: str) -> str:
    if kind.startswith("string"):
        return "must not be empty" if count == 1 and bound == "at least" else (
            f"must have {bound} {count} characters")
    noun = "item" if count == 1 else "items"
    return f"must have {bound} {count} {noun}"


#: keys that were renamed: the old name is refused with a hint naming the new one.
RENAMED_KEYS: dict[tuple[str, ...], str] = {
    ("gate", "on"): "gate.graph (YAML 1.1 tools read a bare `on` key as the boolean true, "
                    "so editors' schema checks failed on it)",
}


def _unknown_key_message(path: tuple[str, ...]) -> str:
    name = path[-1] if path else "?"
    if tuple(path) in RENAMED_KEYS:
        return f"'{name}' was renamed: use {RENAMED_KEYS[tuple(path)]}"
    valid = _keys_at(path[:-1])
    message = f"unknown key '{name}'"
    close = difflib.get_close_matches(name, valid, n=1)
    if close:
        return message + f"; did you mean '{close[0]}'?"
    if valid:
        message += "; valid keys here: " + ", ".join(valid)
    return message


def _choice_message(path: tuple[str, ...], given: Any) -> str:
    allowed = [str(a) for a in _literal_values(_type_at(path))]
    message = "must be one of " + ", ".join(f"'{a}'" for a in allowed)
    if isinstance(given, str):
        close = difflib.get_close_matches(given, allowed, n=1)
        if close:
            message += f"; did you mean '{close[0]}'?"
    return message


def _strip(tp: Any) -> Any:
    """Drop Annotated and Optional wrappers from a type."""
    return bare_type(tp)


def _child_type(tp: Any, part: str) -> Any:
    tp = _strip(tp)
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        found = tp.model_fields.get(part)
        return None if found is None else found.annotation
    origin = get_origin(tp)
    if origin is list:
        return get_args(tp)[0]
    if origin is dict:
        return get_args(tp)[1]
    return None


def _type_at(path: Sequence[str]) -> Any:
    tp: Any = Spec
    for part in path:
        tp = _child_type(tp, part)
        if tp is None:
            return None
    return tp


def _keys_at(path: Sequence[str]) -> list[str]:
    tp = _strip(_type_at(path))
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return list(tp.model_fields)
    return []


def _literal_values(tp: Any) -> tuple[Any, ...]:
    tp = _strip(tp)
    return get_args(tp) if get_origin(tp) is Literal else ()


# --------------------------------------------------------------------------- helpers


def _shown(value: Any) -> Any:
    """A value small enough to show in a message."""
    if isinstance(value, dict):
        return None
    text = repr(value)
    return value if len(text) <= 200 else text[:197] + "..."


def _dedupe(problems: Iterator[Problem] | list[Problem]) -> list[Problem]:
    seen: set[tuple[str | None, str]] = set()
    out = []
    for p in problems:
        if (p.key, p.message) not in seen:
            seen.add((p.key, p.message))
            out.append(p)
    return out


def _sorted_problems(problems: list[Problem]) -> list[Problem]:
    return sorted(problems, key=lambda p: (p.line is not None, p.line or 0))
