"""Bounded reading of a YAML input file: the text checked, then one document composed from the parser's events.

A scenario is a small, plain document: mappings, lists and scalars. What this reader refuses, each with the file,
line and column and what is allowed, is everything else that YAML can express and that only costs time or hides
mistakes:

- more than :data:`MAX_BYTES` of text, bytes that are not UTF-8, text in UTF-16 or UTF-32;
- control characters (the tab and the line breaks excepted), line and paragraph separators, bidirectional
  embeddings, overrides and isolates, non-characters and lone surrogates, written raw or as escapes in a quoted
  string (``"\\e[2J"``, ``"\\u202e"``);
- anchors and aliases (``&a``, ``*a``): a scenario has nothing to repeat, and an alias is how a few hundred bytes
  expand to millions of values or refer to themselves;
- merge keys (``<<``), keys that are lists or mappings, duplicate keys;
- nesting deeper than :data:`MAX_DEPTH`, more than :data:`MAX_NODES` values, more than one document;
- tags other than YAML's own plain types (``!!python/...``, ``!!binary``, ``!!set``, ``!!omap``, local tags).

The parser is libyaml's when PyYAML has it (C, iterative), otherwise PyYAML's own; the composition here is a loop over
events, not a recursion, so that no depth of nesting can exhaust the stack. Keys are always text (the key as written:
``1:`` and ``null:`` are the keys ``"1"`` and ``"null"``); scalar values are typed by YAML 1.1's rules, as
``yaml.safe_load`` types them.
"""
from __future__ import annotations

import re
from typing import Any

import yaml

from .errors import ScenarioError, quoted

MAX_BYTES = 256 * 1024  # a scenario is about 2 KiB
MAX_DEPTH = 16  # a scenario nests 3 deep (targets: weights: error: 1)
MAX_NODES = 10_000  # a scenario holds about 100 values
Marks = dict[tuple, tuple[int, int]]

_PARSER = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
# Refused anywhere in the text: C0 controls but tab, LF and CR; DEL and the C1 controls (NEL, which YAML 1.1 takes as a
# line break, among them); the line and paragraph separators; the bidirectional embeddings, overrides and isolates;
# the non-characters U+FFFE and U+FFFF; lone surrogates.
_FORBIDDEN = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069\ufffe\uffff"
                        "\ud800-\udfff]")
_BREAK = re.compile("\r\n|\r|\n")
_TAG = "tag:yaml.org,2002:"
_SCALAR_TAGS = {f"{_TAG}{t}" for t in ("str", "null", "bool", "int", "float", "timestamp", "value")}
_ALLOWED = "printable text, tabs and line breaks"


def describe_character(ch: str) -> str:
    """``U+001B (a control character)`` and the like, for a message."""
    o = ord(ch)
    if 0x202A <= o <= 0x202E or 0x2066 <= o <= 0x2069:
        what = "a direction-override character"
    elif 0xD800 <= o <= 0xDFFF:
        what = "a lone surrogate"
    elif o in (0x2028, 0x2029):
        what = "a line or paragraph separator"
    elif o in (0xFFFE, 0xFFFF):
        what = "a non-character"
    elif o == 0:
        what = "a NUL character"
    else:
        what = "a control character"
    return f"U+{o:04X} ({what})"


def forbidden_character(text: str) -> int | None:
    """Index of the first character :func:`read` refuses in a text, or None."""
    m = _FORBIDDEN.search(text)
    return m.start() if m else None


def position(text: str, index: int) -> tuple[int, int]:
    """1-based line and column of ``text[index]``, counting line breaks as YAML does (CR LF, CR or LF)."""
    line, start = 1, 0
    for m in _BREAK.finditer(text, 0, index):
        line, start = line + 1, m.end()
    return line, index - start + 1


def decode(data: bytes, path: str) -> str:
    """The text of a UTF-8 file (a byte-order mark dropped); any other encoding refused at its first bad byte."""
    if data.startswith((b"\xff\xfe", b"\xfe\xff", b"\x00\x00\xfe\xff")):
        raise ScenarioError("the file is UTF-16 or UTF-32; allowed: UTF-8 (save the file as UTF-8)", path, 1, 1)
    if len(data) > MAX_BYTES:
        raise ScenarioError(f"the file is {len(data):,} bytes; allowed: at most {MAX_BYTES:,} bytes", path, 1, 1)
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        good = data[:exc.start].decode("utf-8-sig")
        line, column = position(good, len(good))
        raise ScenarioError(f"byte 0x{data[exc.start]:02x} is not UTF-8; allowed: UTF-8 text (save the file as UTF-8)",
                            path, line, column) from None


def check_text(text: str, path: str) -> None:
    """Size and characters of a document's text (see the module's docstring)."""
    if len(text) > MAX_BYTES or len(text.encode("utf-8", "surrogatepass")) > MAX_BYTES:
        raise ScenarioError(f"the text is over {MAX_BYTES:,} bytes; allowed: at most {MAX_BYTES:,} bytes", path, 1, 1)
    i = forbidden_character(text)
    if i is not None:
        line, column = position(text, i)
        raise ScenarioError(f"{describe_character(text[i])} is not allowed; allowed: {_ALLOWED}", path, line, column)


class _Frame:
    """An open list or mapping while its events are read."""

    __slots__ = ("key", "keys", "pending", "value")

    def __init__(self, value, key: tuple):
        self.value, self.key = value, key
        self.pending: str | None = None  # a mapping's key that waits for its value
        self.keys: set[str] = set()


def _at(mark) -> tuple[int, int]:
    return mark.line + 1, mark.column + 1


class _Composer:
    """Events -> one document of dicts, lists and scalars, and the line and column of every key and value."""

    def __init__(self, path: str):
        self.path = path
        self.marks: Marks = {}
        self.stack: list[_Frame] = []
        self.nodes = 0
        self.document: Any = None
        self.resolver = yaml.resolver.Resolver()
        self.constructor = yaml.constructor.SafeConstructor()

    def error(self, message: str, mark) -> ScenarioError:
        return ScenarioError(message, self.path, *_at(mark))

    def _node_start(self, event) -> tuple:
        """Checks shared by every node; the key path the node will have."""
        if isinstance(event, yaml.AliasEvent):
            raise self.error(f"an alias (*{event.anchor}) is not allowed; allowed: the value written out", event.start_mark)
        if event.anchor is not None:
            raise self.error(f"an anchor (&{event.anchor}) is not allowed; allowed: the value written out (anchors "
                             "and aliases are refused in scenario files)", event.start_mark)
        self.nodes += 1
        if self.nodes > MAX_NODES:
            raise self.error(f"more than {MAX_NODES:,} values; allowed: at most {MAX_NODES:,}", event.start_mark)
        if not self.stack:
            return ()
        top = self.stack[-1]
        if isinstance(top.value, list):
            return top.key + (len(top.value),)
        if top.pending is None:  # this node is a key
            if not isinstance(event, yaml.ScalarEvent):
                raise self.error("a key must be text; a list or mapping as a key (? [a, b]) is not allowed",
                                 event.start_mark)
            return top.key + ("<key>",)
        return top.key + (top.pending,)

    def _add(self, value) -> None:
        """Put a finished value into the open list or mapping (or make it the document)."""
        if not self.stack:
            self.document = value
            return
        top = self.stack[-1]
        if isinstance(top.value, list):
            top.value.append(value)
        else:
            top.value[top.pending] = value
            top.pending = None

    def _key(self, event) -> None:
        """A mapping's key: text as written, once per mapping."""
        top, key = self.stack[-1], event.value
        if self._tag(event) == f"{_TAG}merge":
            raise self.error("a merge key (<<) is not allowed; allowed: the keys written out", event.start_mark)
        i = forbidden_character(key)
        if i is not None:
            raise self.error(f"{describe_character(key[i])} in this key is not allowed; allowed: {_ALLOWED}",
                             event.start_mark)
        if key in top.keys:
            raise self.error(f"duplicate key {quoted(key)}; allowed: each key once", event.start_mark)
        top.keys.add(key)
        top.pending = key
        self.marks[top.key + (key, "<key>")] = _at(event.start_mark)

    def _tag(self, event) -> str:
        if event.tag is None or event.tag == "!":
            return self.resolver.resolve(yaml.ScalarNode, event.value, event.implicit)
        return event.tag

    def _scalar(self, event):
        tag = self._tag(event)
        if tag not in _SCALAR_TAGS and tag != f"{_TAG}merge":  # a merge key's tag, "<<" as a value: text
            raise self.error(f"the tag {tag!r} is not allowed; allowed: plain values (text, numbers, true/false, null)",
                             event.start_mark)
        if tag in (f"{_TAG}str", f"{_TAG}value", f"{_TAG}merge"):
            value = event.value
            i = forbidden_character(value)
            if i is not None:  # written as an escape in a quoted string
                raise self.error(f"{describe_character(value[i])} in this text is not allowed; allowed: {_ALLOWED}",
                                 event.start_mark)
            return value
        node = yaml.ScalarNode(tag, event.value, event.start_mark, event.end_mark, event.style)
        try:
            return getattr(self.constructor, "construct_yaml_" + tag[len(_TAG):])(node)
        except (ValueError, OverflowError, TypeError, yaml.YAMLError):
            raise self.error(f"cannot read {event.value[:40]!r} as {tag[len(_TAG):]}; allowed: a plain value",
                             event.start_mark) from None

    def _open(self, event, kind: type, tags: tuple[str, ...]) -> None:
        key = self._node_start(event)
        if event.tag not in (None, "!", *tags):
            raise self.error(f"the tag {event.tag!r} is not allowed; allowed: plain lists and mappings", event.start_mark)
        if len(self.stack) >= MAX_DEPTH:
            raise self.error(f"nesting deeper than {MAX_DEPTH} levels; allowed: at most {MAX_DEPTH}", event.start_mark)
        self.marks[key] = _at(event.start_mark)
        self.stack.append(_Frame(kind(), key))

    def feed(self, event) -> None:
        if isinstance(event, (yaml.ScalarEvent, yaml.AliasEvent)):
            key = self._node_start(event)
            if key[-1:] == ("<key>",):
                self._key(event)
            else:
                self.marks[key] = _at(event.start_mark)
                self._add(self._scalar(event))
        elif isinstance(event, yaml.SequenceStartEvent):
            self._open(event, list, (f"{_TAG}seq",))
        elif isinstance(event, yaml.MappingStartEvent):
            self._open(event, dict, (f"{_TAG}map",))
        elif isinstance(event, (yaml.SequenceEndEvent, yaml.MappingEndEvent)):
            self._add(self.stack.pop().value)


def read(text: str, path: str) -> tuple[Any, Marks]:
    """One YAML document from ``text``: (the value, the 1-based line and column of every key path).

    A key path is a tuple of keys and list indices; ``path + ("<key>",)`` locates a mapping's key itself.

    Raises
    ------
    ScenarioError
        Located at the offending character or node (see the module's docstring for what is refused).

    Examples
    --------
    >>> doc, marks = read("a: [1, x]\\n", "f.yaml")
    >>> doc, marks[("a", 1)]
    ({'a': [1, 'x']}, (1, 8))
    """
    check_text(text, path)
    composer = _Composer(path)
    parser = _PARSER(text)
    documents = 0
    try:
        while True:
            event = parser.get_event()
            if event is None or isinstance(event, yaml.StreamEndEvent):
                break
            if isinstance(event, yaml.DocumentStartEvent):
                documents += 1
                if documents > 1:
                    raise composer.error("a second YAML document (---) is not allowed; allowed: one document per file",
                                         event.start_mark)
            elif not isinstance(event, (yaml.StreamStartEvent, yaml.DocumentEndEvent)):
                composer.feed(event)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        problem = exc.problem or exc.context or "cannot parse"
        raise ScenarioError(f"malformed YAML: {problem}", path, *(_at(mark) if mark else (1, 1))) from None
    except yaml.reader.ReaderError as exc:
        line, column = position(text, min(exc.position, len(text)))
        raise ScenarioError(f"malformed YAML: {exc.reason}", path, line, column) from None
    except yaml.YAMLError as exc:
        raise ScenarioError(f"malformed YAML: {str(exc).splitlines()[0] if str(exc) else 'cannot parse'}", path, 1, 1) \
            from None
    finally:
        parser.dispose()
    return composer.document, composer.marks
