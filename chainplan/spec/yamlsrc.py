"""YAML loading that remembers where every value came from.

PyYAML's composer gives nodes with start marks; this turns them into plain
dicts and lists whose subclasses carry the line of each key and item, so spec
errors can name file, line and field."""
from __future__ import annotations

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


def _convert(node, loader, path):
    if isinstance(node, yaml.MappingNode):
        out = LDict()
        out.line, out.key_lines = node.start_mark.line + 1, {}
        for knode, vnode in node.value:
            if not isinstance(knode, yaml.ScalarNode):
                raise SpecError("keys must be plain words", path, knode.start_mark.line + 1)
            key = knode.value
            if key == "<<":
                raise SpecError("YAML merge keys ('<<') are not supported in chain specs", path,
                                knode.start_mark.line + 1)
            if key in out:
                raise SpecError(f"'{key}' is given twice", path, knode.start_mark.line + 1, key)
            out[key] = _convert(vnode, loader, path)
            out.key_lines[key] = knode.start_mark.line + 1
        return out
    if isinstance(node, yaml.SequenceNode):
        out = LList(_convert(v, loader, path) for v in node.value)
        out.line, out.item_lines = node.start_mark.line + 1, [v.start_mark.line + 1 for v in node.value]
        return out
    return loader.construct_object(node, deep=True)


def load_text(text: str, path: str):
    """Parse YAML text (libyaml when present: about five times faster); syntax
    errors become SpecError with the line."""
    loader = None
    try:
        loader = _Loader(text)
        node = loader.get_single_node()
        if node is None:
            raise SpecError("the file is empty; a chain spec starts with 'name:', 'source:' and 'stages:'", path, 1)
        return _convert(node, loader, path)
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


def load_file(path: str):
    try:
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
    except FileNotFoundError:
        raise SpecError("no such file", path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"cannot read the file ({exc})", path) from None
    return load_text(text, path)
