"""YAML loading that remembers where every value came from.

PyYAML's composer gives nodes with start marks; this turns them into plain
dicts and lists whose subclasses carry the line of each key and item, so spec
errors can name file, line and field."""
from __future__ import annotations

import os

import yaml

from ..errors import SpecError


class LDict(dict):
    line: int = 0
    key_lines: dict

    def line_of(self, key) -> int:
        return self.key_lines.get(key, self.line)


class LList(list):
    line: int = 0
    item_lines: list

    def line_of(self, i) -> int:
        return self.item_lines[i] if 0 <= i < len(self.item_lines) else self.line


_Loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)

#: Bounds on the work one spec file may ask for (docs/spec.md, "Limits").
MAX_SPEC_BYTES = 1 << 20          # 1 MiB of text per file
MAX_DEPTH = 64                    # nesting of mappings and lists
MAX_VALUES = 100_000              # values YAML aliases stand for (copies of what their anchors built)


def _line(event) -> int:
    return event.start_mark.line + 1


def _compose(loader, path):
    """The document as LDict/LList/scalars, built from the parser's events in one
    loop (no recursion: nesting is bounded by MAX_DEPTH, not by the Python stack).
    An alias reuses the value its anchor built; every value it stands for counts
    towards MAX_VALUES, so an alias bomb is refused after 100 000 copied values instead
    of being expanded to gigabytes (the safe loaders' alias counting).  Values written
    out in the text do not count: MAX_SPEC_BYTES bounds them (a value takes at least
    two bytes), so a 10 000-stage chain written plainly is read."""
    anchors: dict = {}
    stack: list = []                      # [container, pending key, start event, values it stands for]
    total = 0                             # values the aliases stand for
    root = None
    loader.get_event()                    # StreamStart
    if loader.check_event(yaml.StreamEndEvent):
        return None
    loader.get_event()                    # DocumentStart
    while True:
        ev = loader.get_event()
        if isinstance(ev, (yaml.MappingStartEvent, yaml.SequenceStartEvent)):
            if ev.tag not in (None, "!", "tag:yaml.org,2002:map", "tag:yaml.org,2002:seq"):
                raise SpecError(f"YAML tag '{short(ev.tag)}' is not supported in chain specs", path, _line(ev))
            if len(stack) >= MAX_DEPTH:
                raise SpecError(f"the spec nests mappings and lists more than {MAX_DEPTH} levels deep; "
                                "a chain spec needs a handful", path, _line(ev))
            c = LDict() if isinstance(ev, yaml.MappingStartEvent) else LList()
            c.line = _line(ev)
            if isinstance(c, LDict):
                c.key_lines = {}
            else:
                c.item_lines = []
            stack.append([c, None, ev, 1])
            continue
        if isinstance(ev, (yaml.MappingEndEvent, yaml.SequenceEndEvent)):
            value, _, ev, count = stack.pop()
            if ev.anchor is not None:
                anchors[ev.anchor] = (value, count)
        elif isinstance(ev, yaml.AliasEvent):
            if ev.anchor not in anchors:
                raise SpecError(f"YAML alias '*{short(ev.anchor)}' names no anchor above it", path, _line(ev))
            value, count = anchors[ev.anchor]
            total += count
        elif isinstance(ev, yaml.ScalarEvent):
            tag = loader.resolve(yaml.ScalarNode, ev.value, ev.implicit) if ev.tag in (None, "!") else ev.tag
            value, count = loader.construct_object(yaml.ScalarNode(tag, ev.value, ev.start_mark, ev.end_mark,
                                                                   ev.style)), 1
            if ev.anchor is not None:
                anchors[ev.anchor] = (value, 1)
        else:                                  # DocumentEnd
            break
        if total > MAX_VALUES:
            raise SpecError(f"the YAML aliases of the spec stand for more than {MAX_VALUES} values (each expands to a "
                            "copy of its anchor's value); "
                            "write it out plainly", path, _line(ev))
        if not stack:
            root = value
            continue
        _add(stack[-1], value, count, ev, path)
    if not loader.check_event(yaml.StreamEndEvent):
        raise SpecError("the file holds more than one YAML document ('---'); a chain spec is one",
                        path, loader.peek_event().start_mark.line + 1)
    return root


def _add(frame, value, count, ev, path) -> None:
    """Put ``value`` (standing for ``count`` values) into the open container of ``frame``."""
    container = frame[0]
    frame[3] += count
    if isinstance(container, LList):
        container.append(value)
        container.item_lines.append(_line(ev))
        return
    if frame[1] is None:                       # a key
        if isinstance(value, (LDict, LList)) or isinstance(ev, yaml.AliasEvent):
            raise SpecError("keys must be plain words", path, _line(ev))
        key = ev.value
        if key == "<<":
            raise SpecError("YAML merge keys ('<<') are not supported in chain specs", path, _line(ev))
        if key in container:
            raise SpecError(f"'{short(key)}' is given twice", path, _line(ev), short(key))
        frame[1] = (key, _line(ev))
        return
    key, line = frame[1]
    container[key] = value
    container.key_lines[key] = line
    frame[1] = None


def short(text, limit: int = 60) -> str:
    """A user's text for a message: newlines escaped, cut to ``limit`` characters."""
    text = str(text).encode("unicode_escape").decode("ascii") if any(c in str(text) for c in "\n\r\t\x00") \
        else str(text)
    return text if len(text) <= limit else text[:limit - 1] + "…"


def load_text(text: str, path: str):
    """Parse YAML text (libyaml when present: about five times faster); syntax
    errors become SpecError with the line."""
    if len(text) > MAX_SPEC_BYTES:
        raise SpecError(f"the file is larger than {MAX_SPEC_BYTES >> 20} MiB; a chain spec is a few kilobytes", path)
    loader = None
    try:
        loader = _Loader(text)
        doc = _compose(loader, path)
        if doc is None:
            raise SpecError("the file is empty; a chain spec starts with 'name:', 'source:' and 'stages:'", path, 1)
        return doc
    except yaml.reader.ReaderError as exc:     # control characters and the like
        char = exc.character if isinstance(exc.character, int) else ord(exc.character)
        raise SpecError(f"character U+{char:04X} is not allowed in YAML ({exc.reason})", path,
                        text.count("\n", 0, exc.position) + 1) from None
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark else None
        raise SpecError(f"YAML syntax error: {exc.problem or exc.context}", path, line) from None
    except yaml.YAMLError as exc:
        raise SpecError(f"YAML error: {exc}", path) from None
    finally:
        if loader is not None:
            loader.dispose()


#: (device, inode) of every file this process read as a spec or parts file: the inputs
#: of the run, which the output writer (render/files.py) never writes over.
_READ: set = set()


def forget_files_read() -> None:
    """Start a new run (the command line calls it first)."""
    _READ.clear()


def files_read() -> frozenset:
    """The files read so far in this process, as (device, inode) pairs."""
    return frozenset(_READ)


def read_text(path: str) -> str:
    """A spec or parts file's text: at most MAX_SPEC_BYTES read (``/dev/zero`` is refused
    after 1 MiB, not read until memory runs out), folders and unreadable files refused,
    UTF-8 decoded with the line of a bad byte."""
    path = os.fspath(path)
    if "\0" in path:
        raise SpecError("a file name cannot contain a NUL byte", short(path))
    try:
        with open(path, "rb") as fh:
            st = os.fstat(fh.fileno())
            _READ.add((st.st_dev, st.st_ino))
            data = fh.read(MAX_SPEC_BYTES + 1)
    except FileNotFoundError:
        raise SpecError("no such file", path) from None
    except IsADirectoryError:
        raise SpecError("this is a folder, not a spec file", path) from None
    except OSError as exc:
        raise SpecError(f"cannot read the file ({exc.strerror or exc})", path) from None
    if len(data) > MAX_SPEC_BYTES:
        raise SpecError(f"the file is larger than {MAX_SPEC_BYTES >> 20} MiB; a chain spec is a few kilobytes", path)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise SpecError(f"byte 0x{data[exc.start]:02X} is not UTF-8 text; save the file as UTF-8", path,
                        data.count(b"\n", 0, exc.start) + 1) from None


def load_file(path: str):
    return load_text(read_text(path), path)
