"""Reading a study file: bytes -> text -> plain data, refusing anything but plain YAML data.

Only mappings, lists, strings, numbers, booleans and null are built. The file is first *composed*
into a node graph (nothing is constructed yet) and that graph is checked:

* every tag must be one of the plain-data tags (``!!python/...``, ``!!binary``, ``!!set``, custom
  ``!tags`` ... are refused, so no object is ever constructed from the file);
* aliases are counted and the size the document would have once every alias is expanded is
  computed on the graph (memoised), so an alias bomb is refused before it is built;
* a recursive alias (a list containing itself) is refused;
* duplicated keys in one mapping are refused (plain YAML loaders keep the last one silently);
* mapping keys must be strings.

The scalar rules are the unambiguous core of YAML 1.2: ``true``/``false`` only (``yes``, ``no``,
``on``, ``off`` stay strings), decimal integers only (``010`` and ``0x1A`` stay strings and are then
refused by the schema), floats with a dot or an exponent (``1e1`` is the number 10), no sexagesimal
numbers and no timestamps (``2026-12-02`` stays a string).
"""
from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import yaml

from .errors import StudyError, join_path

#: refuse study files larger than this (bytes)
MAX_FILE_BYTES = 1_000_000
#: refuse documents with more alias uses than this
MAX_ALIASES = 200
#: refuse documents that would have more nodes than this once every alias is expanded
MAX_EXPANDED_NODES = 200_000

_Y = "tag:yaml.org,2002:"
PLAIN_TAGS = frozenset(_Y + t for t in ("str", "int", "float", "bool", "null", "map", "seq", "merge"))

_FLOAT = re.compile(r"""^(?:[-+]?(?:[0-9][0-9_]*(?:\.[0-9_]*)?[eE][-+]?[0-9]+
                      |[0-9][0-9_]*\.[0-9_]*
                      |\.[0-9_]+(?:[eE][-+]?[0-9]+)?)
                      |[-+]?\.(?:inf|Inf|INF)
                      |\.(?:nan|NaN|NAN))$""", re.X)
_INT = re.compile(r"^[-+]?(?:0|[1-9][0-9_]*)$")
_BOOL = re.compile(r"^(?:true|True|TRUE|false|False|FALSE)$")
_NULL = re.compile(r"^(?:~|null|Null|NULL|)$")
_MERGE = re.compile(r"^(?:<<)$")


class _StudyLoader(yaml.SafeLoader):
    """SafeLoader with YAML-1.2-like scalar resolution and an alias counter."""

    yaml_implicit_resolvers: dict = {}

    def __init__(self, stream):
        super().__init__(stream)
        self.alias_count = 0

    def compose_node(self, parent, index):  # noqa: D401 - PyYAML hook
        if self.check_event(yaml.AliasEvent):
            self.alias_count += 1
            if self.alias_count > MAX_ALIASES:
                mark = self.peek_event().start_mark
                raise StudyError("file", f"too many YAML aliases (more than {MAX_ALIASES}; line {mark.line + 1})",
                                 self.alias_count, f"at most {MAX_ALIASES} alias uses (*name)")
        return super().compose_node(parent, index)

    # floats as Python's float() reads them (no sexagesimal form)
    def construct_yaml_float(self, node):
        value = self.construct_scalar(node).replace("_", "").lower()
        if value in (".inf", "+.inf"):
            return float("inf")
        if value == "-.inf":
            return float("-inf")
        if value == ".nan":
            return float("nan")
        return float(value)

    def construct_yaml_int(self, node):
        return int(self.construct_scalar(node).replace("_", ""))


_StudyLoader.add_constructor(_Y + "float", _StudyLoader.construct_yaml_float)
_StudyLoader.add_constructor(_Y + "int", _StudyLoader.construct_yaml_int)
for _tag, _rx, _first in ((_Y + "bool", _BOOL, "tTfF"), (_Y + "float", _FLOAT, "-+0123456789."),
                          (_Y + "int", _INT, "-+0123456789"), (_Y + "merge", _MERGE, "<"),
                          (_Y + "null", _NULL, ["~", "n", "N", ""])):
    _StudyLoader.add_implicit_resolver(_tag, _rx, list(_first))


def bytes2text(data: bytes) -> str:
    """Decode a study file's bytes as UTF-8 (a leading byte-order mark is allowed).

    Raises
    ------
    StudyError
        ``file``: too large, or not valid UTF-8 (names the offset of the first bad byte).
    """
    if len(data) > MAX_FILE_BYTES:
        raise StudyError("file", "study file too large", f"{len(data)} bytes", f"at most {MAX_FILE_BYTES} bytes")
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        bad = data[exc.start:exc.start + 1]
        raise StudyError("file", f"not UTF-8 text (byte 0x{bad.hex()} at offset {exc.start})", bad,
                         "UTF-8 encoded text") from None


def _check_graph(root: yaml.Node) -> None:
    """Tags, key types, duplicates, cycles and expanded size of a composed node graph."""
    sizes: dict[int, int] = {}
    active: set[int] = set()

    def visit(node: yaml.Node, path: list) -> int:
        key = id(node)
        if key in sizes:
            return sizes[key]
        where = join_path(*path) or "(root)"
        if key in active:
            raise StudyError(where, "recursive YAML alias (a node contains itself)", None,
                             "aliases to finished nodes only", show_value=False)
        if node.tag not in PLAIN_TAGS:
            raise StudyError(where, f"YAML tag {node.tag.replace(_Y, '!!')} is not allowed: a study file is plain data",
                             node.tag.replace(_Y, "!!"), "plain YAML: mappings, lists, strings, numbers, "
                             "true/false, null")
        active.add(key)
        total = 1
        if isinstance(node, yaml.MappingNode):
            seen: set[str] = set()
            for knode, vnode in node.value:
                if knode.tag == _Y + "merge":
                    total += visit(vnode, path)
                    continue
                if not isinstance(knode, yaml.ScalarNode) or knode.tag != _Y + "str":
                    shown = knode.value if isinstance(knode, yaml.ScalarNode) else "<" + knode.id + ">"
                    raise StudyError(where, "mapping keys must be plain strings", shown, "names such as depth_mm")
                if knode.value in seen:
                    raise StudyError(join_path(*path, knode.value), "key given twice in the same mapping",
                                     knode.value, "each key once")
                seen.add(knode.value)
                total += 1 + visit(vnode, path + [knode.value])
        elif isinstance(node, yaml.SequenceNode):
            for i, item in enumerate(node.value):
                total += visit(item, path + [i])
        active.discard(key)
        if total > MAX_EXPANDED_NODES:
            raise StudyError(where, "document too large once YAML aliases are expanded (alias bomb?)",
                             f"more than {MAX_EXPANDED_NODES} nodes", f"at most {MAX_EXPANDED_NODES} nodes")
        sizes[key] = total
        return total

    visit(root, [])


def text2data(text: str) -> Any:
    """Parse one YAML document into plain data (dict / list / str / int / float / bool / None).

    Raises
    ------
    StudyError
        Syntax errors (``file``, with line and column), several documents, refused tags, alias
        bombs, recursive aliases, duplicated or non-string keys (key path of the offending node).
    """
    loader = _StudyLoader(text)
    try:
        try:
            node = loader.get_single_node()
        except yaml.MarkedYAMLError as exc:
            mark = exc.problem_mark or exc.context_mark
            where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
            lines = text.splitlines()
            shown = lines[mark.line].strip() if mark and 0 <= mark.line < len(lines) else None
            raise StudyError("file", f"YAML syntax error{where}: {exc.problem or exc.context}", shown,
                             "one plain YAML document") from None
        except yaml.YAMLError as exc:
            raise StudyError("file", f"YAML error: {exc}", None, "one plain YAML document", show_value=False) from None
        except RecursionError:
            raise StudyError("file", "YAML nested too deeply", None, "a few levels of nesting", show_value=False) from None
        if node is None:
            return None
        try:
            _check_graph(node)
        except RecursionError:
            raise StudyError("file", "YAML nested too deeply", None, "a few levels of nesting", show_value=False) from None
        try:
            return loader.construct_document(node)
        except yaml.YAMLError as exc:  # e.g. a bad !!int / !!float scalar
            raise StudyError("file", f"YAML value error: {getattr(exc, 'problem', exc)}", None,
                             "plain YAML data", show_value=False) from None
        except (ValueError, TypeError) as exc:
            raise StudyError("file", f"YAML value error: {exc}", None, "plain YAML data", show_value=False) from None
    finally:
        loader.dispose()


def load_yaml_file(path: str | Path) -> Any:
    """Read, size-check, decode and safely parse a study file."""
    p = Path(path)
    try:
        size = p.stat().st_size
        if size > MAX_FILE_BYTES:
            raise StudyError("file", "study file too large", f"{size} bytes", f"at most {MAX_FILE_BYTES} bytes")
        with open(p, "rb") as fh:
            data = fh.read(MAX_FILE_BYTES + 1)
    except OSError as exc:
        raise StudyError("file", f"cannot read study file ({exc.strerror})", str(p), "a readable YAML file") from None
    return text2data(bytes2text(data))
