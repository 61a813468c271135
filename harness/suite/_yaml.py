"""Suite text to Python values, with bounds: text size, node count after aliases, no repeated keys.

PyYAML keeps an alias as a reference to the anchored value, so a few lines can
stand for billions of values (an "alias bomb") that hang whatever later walks
them.  The loader here composes the node graph first, counts every node as
often as aliases repeat it (each distinct node is visited once, so counting is
quick), and refuses the text above :data:`~harness.config.MAX_YAML_NODES`
before any Python value is built.  A key given twice in one mapping is refused
with its line instead of the last value silently winning.
"""

from __future__ import annotations

from typing import Any

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from ..config import MAX_SUITE_BYTES, MAX_YAML_NODES
from ..errors import InputError
from ..text import show

_BASE: type = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
_MERGE_TAG = "tag:yaml.org,2002:merge"


class _BoundedLoader(_BASE):
    """Safe loader that refuses a key repeated within one mapping."""

    def construct_mapping(self, node: Node, deep: bool = False) -> Any:
        if isinstance(node, MappingNode):
            seen: dict[Any, int] = {}
            for key_node, _value in node.value:
                if key_node.tag == _MERGE_TAG or not isinstance(key_node, ScalarNode):
                    continue
                key = self.construct_object(key_node)
                line = key_node.start_mark.line + 1
                if key in seen:
                    raise _Repeated(key, seen[key], key_node)
                seen[key] = line
        return super().construct_mapping(node, deep=deep)


class _Repeated(yaml.constructor.ConstructorError):
    def __init__(self, key: Any, first_line: int, key_node: Node) -> None:
        super().__init__(
            None,
            None,
            f"key {show(key)} given twice in one mapping (first on line {first_line}); "
            "expected each key once",
            key_node.start_mark,
        )


def expanded_size(root: Node, limit: int) -> int:
    """Number of nodes of ``root`` with every alias expanded, counted up to just past ``limit``.

    Each distinct node's size is computed once (aliases share nodes), so the
    work is proportional to the text, not to the expansion.
    """
    sizes: dict[int, int] = {}
    stack: list[tuple[Node, bool]] = [(root, False)]
    while stack:
        node, children_done = stack.pop()
        if id(node) in sizes:
            continue
        children = _children(node)
        if children_done or not children:
            total = 1 + sum(sizes.get(id(c), 0) for c in children)
            sizes[id(node)] = min(total, limit + 1)
            continue
        stack.append((node, True))
        stack.extend((c, False) for c in children if id(c) not in sizes)
    return sizes[id(root)]


def _children(node: Node) -> list[Node]:
    if isinstance(node, SequenceNode):
        return list(node.value)
    if isinstance(node, MappingNode):
        return [part for pair in node.value for part in pair]
    return []


def read_yaml(text: str) -> Any:
    """Parse suite text within the bounds; every problem is one :class:`InputError`.

    Parameters
    ----------
    text : str
        The YAML document.

    Raises
    ------
    InputError
        Text too long, too many nodes, a repeated key or invalid YAML; the
        place is empty or ``line L, column C`` (the caller adds the file).
    """
    size = len(text.encode("utf-8", errors="replace"))
    if size > MAX_SUITE_BYTES:
        raise InputError(
            "",
            f"expected a suite of at most {MAX_SUITE_BYTES:,} bytes, got {size:,} "
            "(a suite holds settings; data belongs in a table file)",
        )
    loader = _BoundedLoader(text)
    try:
        root = loader.get_single_node()
        if root is None:
            return None
        nodes = expanded_size(root, MAX_YAML_NODES)
        if nodes > MAX_YAML_NODES:
            raise InputError(
                "",
                f"expected at most {MAX_YAML_NODES:,} YAML nodes counting what aliases repeat, "
                f"got more than {MAX_YAML_NODES:,} (aliases '*name' expanding too far)",
            )
        return loader.construct_document(root)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f"line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise InputError(at, f"expected valid YAML ({problem})") from None
    finally:
        loader.dispose()
