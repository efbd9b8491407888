"""YAML written by a user (programme.yaml, front matter of narrative pages), read in bounded time and memory.

:func:`load_yaml` parses with the safe loader's grammar and builds the node tree itself,
event by event, so that it can refuse what makes YAML expensive or surprising before any
value is constructed:

* anchors and aliases (``&name``, ``*name``): an alias repeats a whole subtree, and a few
  hundred bytes of nested aliases ("billion laughs") expand to gigabytes;
* nesting deeper than :data:`MAX_DEPTH` (the settings need three levels);
* more than one document in the text.

Values are then made by PyYAML's ``SafeConstructor`` (no Python objects, no tags beyond
the YAML core types). A value that cannot be made (``2025-02-30``, month 13, an integer of
thousands of digits) or a number that is not finite (``.nan``, ``.inf``) is a problem at
its own line and column; every such problem is reported, not only the first.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import yaml
from yaml.constructor import ConstructorError, SafeConstructor
from yaml.resolver import Resolver

#: Deepest nesting of lists and mappings accepted (programme.yaml needs 3).
MAX_DEPTH = 20
#: Longest scalar text quoted back in a message.
SHOWN_CHARS = 40

# libyaml's C parser when available (about 15 times faster on big files); same grammar and marks
_PARSER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


@dataclass
class YamlProblem:
    """One problem at a 1-based line and column of the YAML text (None when unknown)."""

    line: int | None
    column: int | None
    message: str


class YamlError(Exception):
    """The text cannot be turned into values; :attr:`problems` says where and why."""

    def __init__(self, problems: list[YamlProblem]) -> None:
        super().__init__("; ".join(p.message for p in problems))
        self.problems = problems


def _short(text: Any) -> str:
    t = str(text)
    return t if len(t) <= SHOWN_CHARS else t[:SHOWN_CHARS] + "…"


def _problem(mark: Any, message: str) -> YamlProblem:
    if mark is None:
        return YamlProblem(None, None, message)
    return YamlProblem(mark.line + 1, mark.column + 1, message)


def _compose(text: str) -> yaml.Node | None:
    """Return the node tree of the single document in *text* (None when empty)."""
    resolver = Resolver()
    stack: list[tuple[yaml.Node, list[yaml.Node]]] = []
    root: yaml.Node | None = None
    documents = 0
    for event in yaml.parse(text, Loader=_PARSER):
        if isinstance(event, yaml.DocumentStartEvent):
            documents += 1
            if documents > 1:
                raise YamlError([_problem(event.start_mark, "a second YAML document ('---') is not "
                                          "allowed here; keep one document")])
            continue
        if isinstance(event, yaml.AliasEvent):
            raise YamlError([_problem(event.start_mark, f"alias '*{_short(event.anchor)}' refused: anchors "
                                      "and aliases (&name, *name) are not accepted; write the value out")])
        if isinstance(event, (yaml.ScalarEvent, yaml.SequenceStartEvent, yaml.MappingStartEvent)):
            if event.anchor is not None:
                raise YamlError([_problem(event.start_mark, f"anchor '&{_short(event.anchor)}' refused: "
                                          "anchors and aliases (&name, *name) are not accepted; write "
                                          "the value out")])
            node: yaml.Node
            if isinstance(event, yaml.ScalarEvent):
                tag = event.tag
                if tag is None or tag == "!":
                    tag = resolver.resolve(yaml.ScalarNode, event.value, event.implicit)
                node = yaml.ScalarNode(tag, event.value, event.start_mark, event.end_mark, style=event.style)
            else:
                if len(stack) >= MAX_DEPTH:
                    raise YamlError([_problem(event.start_mark, f"nested more than {MAX_DEPTH} levels deep; "
                                              "not read")])
                kind = yaml.SequenceNode if isinstance(event, yaml.SequenceStartEvent) else yaml.MappingNode
                tag = event.tag
                if tag is None or tag == "!":
                    tag = resolver.resolve(kind, None, event.implicit)
                node = kind(tag, [], event.start_mark, None, flow_style=event.flow_style)
                stack.append((node, []))
                continue
        elif isinstance(event, (yaml.SequenceEndEvent, yaml.MappingEndEvent)):
            node, items = stack.pop()
            node.end_mark = event.end_mark
            node.value = list(zip(items[0::2], items[1::2])) if isinstance(node, yaml.MappingNode) else items
        else:
            continue
        if stack:
            stack[-1][1].append(node)
        else:
            root = node
    return root


class _NotFinite(ValueError):
    """A float scalar such as .nan or .inf."""


class _Constructor(SafeConstructor):
    """SafeConstructor that records, at the node, every value it cannot make."""

    def __init__(self) -> None:
        super().__init__()
        self.problems: list[YamlProblem] = []

    def construct_object(self, node: yaml.Node, deep: bool = False) -> Any:
        try:
            return super().construct_object(node, deep=deep)
        except ConstructorError as exc:
            self.problems.append(_problem(exc.problem_mark or node.start_mark, str(exc.problem or exc.context)))
        except (ValueError, OverflowError, TypeError, ArithmeticError) as exc:
            what = {"tag:yaml.org,2002:timestamp": "a date",
                    "tag:yaml.org,2002:int": "a whole number",
                    "tag:yaml.org,2002:float": "a finite number"}.get(node.tag, "a value")
            shown = _short(node.value) if isinstance(node, yaml.ScalarNode) else node.tag
            detail = "" if isinstance(exc, _NotFinite) else f" ({_short(exc)})"
            self.problems.append(_problem(node.start_mark, f"'{shown}' is not {what}{detail}"))
        self.constructed_objects[node] = None
        self.recursive_objects.pop(node, None)
        return None

    def construct_yaml_float(self, node: yaml.ScalarNode) -> Any:
        value = super().construct_yaml_float(node)
        if not math.isfinite(value):
            raise _NotFinite()
        return value


_Constructor.add_constructor("tag:yaml.org,2002:float", _Constructor.construct_yaml_float)


def load_yaml(text: str) -> tuple[yaml.Node | None, Any]:
    """Return (node tree, values) of YAML *text*; raise :class:`YamlError` with located problems."""
    try:
        node = _compose(text)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        raise YamlError([_problem(mark, f"YAML syntax: {exc.problem or exc.context}")]) from None
    except yaml.YAMLError as exc:
        raise YamlError([YamlProblem(None, None, f"YAML syntax: {_short(exc)}")]) from None
    if node is None:
        return None, None
    constructor = _Constructor()
    try:
        data = constructor.construct_document(node)
    except yaml.MarkedYAMLError as exc:  # a mapping-level problem, e.g. a list used as a key
        constructor.problems.append(_problem(exc.problem_mark or exc.context_mark,
                                             str(exc.problem or exc.context)))
    if constructor.problems:
        raise YamlError(constructor.problems)
    return node, data
