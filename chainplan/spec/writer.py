"""Write a chain with chosen buffers inserted, as a spec the loader reads back.

The original text is kept as it is — comments, order, formatting — and each
buffer's stage block is inserted textually in the ``stages:`` list right
before the stage it feeds (using the line numbers the loader recorded).
The block carries the candidate's fields as written in its parts file, under
the buffer's stage name; a candidate with an input bias network gets a second
block before it, an ``ac_coupling`` named ``buf_<reader>_bias``.  Where the spec connects stages with ``from:``, the
buffer gets ``from: <node>`` and the stage it feeds is re-pointed to the
buffer; where it relies on list order, inserting right before the reader is
enough.  ``include:`` paths are rewritten relative to the new file when it
lives in another folder.  The result is parsed again before anything is
written; the command writes it with the one output writer (render/files.py),
so a failure leaves no partial file and the file keeps its mode.
"""
from __future__ import annotations

import os
import re

import yaml

from ..errors import SpecError, UsageError
from .insert import bias_names, buffer_names
from .model import Chain

FROM_RE = re.compile(r"^(\s*(?:-\s+)?from:\s*)([^#\s][^#]*?)(\s*(?:#.*)?)$")
ITEM_RE = re.compile(r"^(\s*)-\s+(\S)")


def buffered_text(chain: Chain, placement: dict, text: str, new_path: str | None = None) -> str:
    """The spec text with ``placement`` (reader -> Candidate) inserted."""
    lines = text.splitlines(keepends=True)
    names, biases = buffer_names(chain), bias_names(chain)
    explicit = any("from" in st.field_lines for st in chain.stages)
    edits = sorted(placement.items(), key=lambda kv: chain.stage(kv[0]).line, reverse=True)
    for reader, cand in edits:
        st = chain.stage(reader)
        i = st.line - 1
        m = ITEM_RE.match(lines[i])
        if m is None or lines[i].lstrip().startswith("- {"):
            raise UsageError(f"cannot rewrite stage '{reader}' (line {st.line}): write it as a block mapping "
                             "('- name: …' with one field per line) to insert a buffer before it")
        indent = m.group(1)
        if "from" in st.field_lines:
            j = st.field_lines["from"] - 1
            fm = FROM_RE.match(lines[j].rstrip("\n"))
            if fm is None:
                raise UsageError(f"cannot rewrite the 'from:' of stage '{reader}' (line {j + 1})")
            lines[j] = fm.group(1) + names[reader] + fm.group(3) + "\n"
        note = f"{indent}  # buffer '{cand.name}' from {os.path.basename(cand.path)}, placed by chainplan buffers\n"
        feed = st.parent
        block = []
        if cand.input_bias is not None:
            block += _block(cand.input_bias, biases[reader], feed if explicit else None, indent)
            block.append(note.replace("# buffer", "# input bias of buffer"))
            feed = biases[reader]
        block += _block(cand.stage, names[reader], feed if explicit else None, indent) + [note]
        lines[i:i] = block
    out = "".join(lines)
    if new_path is not None and chain.path is not None:
        out = _move_includes(out, chain.path, new_path)
    return out


def _block(st, name: str, parent: str | None, indent: str) -> list[str]:
    """A candidate's stage block as written in its parts file, named ``name``."""
    pad = indent + "  "
    out = [f"{indent}- name: {name}\n", f"{pad}kind: {st.kind}\n"]
    if parent is not None:
        out.append(f"{pad}from: {parent}\n")
    rails = st.raw.get("__rails__", {})
    keys = sorted((k for k in st.raw if k != "__rails__"), key=lambda k: st.field_lines.get(k, 0))
    for key in keys:
        value = rails.get(key, st.raw[key])
        out.append(f"{pad}{key}: {_scalar(value)}\n")
    return out


def _scalar(value) -> str:
    """A YAML scalar as it would be written by hand (quoted only where YAML needs it)."""
    text = yaml.safe_dump(value, allow_unicode=True, width=1000).strip()
    return text.removesuffix("...").strip()


def _move_includes(text: str, old_path: str, new_path: str) -> str:
    """Rewrite relative include paths, on the lines that hold them, so they still name
    the same files from the new folder."""
    from .yamlsrc import LList, load_text
    old_dir = os.path.dirname(os.path.abspath(old_path))
    new_dir = os.path.dirname(os.path.abspath(new_path))
    doc = load_text(text, old_path)
    if old_dir == new_dir or "include" not in doc:
        return text
    inc = doc["include"]
    items = [(p, inc.line_of(i)) for i, p in enumerate(inc)] if isinstance(inc, LList) else \
        [(inc, doc.line_of("include"))]
    lines = text.splitlines(keepends=True)
    for p, line in items:
        if not isinstance(p, str) or os.path.isabs(p):
            continue
        moved = os.path.relpath(os.path.join(old_dir, p), new_dir).replace(os.sep, "/")
        lines[line - 1] = re.sub(r"(?<![\w./-])" + re.escape(p) + r"(?![\w./-])", moved, lines[line - 1], count=1)
    return "".join(lines)


def buffered_file(chain: Chain, placement: dict, out_path: str) -> bytes:
    """The bytes of the buffered spec for ``out_path``, checked to read back with every
    buffer in it.  The original's line endings (CRLF stays CRLF) and a UTF-8 byte-order
    mark are kept; the caller writes it (render/files.py: atomically, mode kept)."""
    from .loader import load_chain_text
    from .yamlsrc import read_text
    if chain.path is None or not os.path.isfile(chain.path):
        raise UsageError("the chain was not read from a file; there is no text to rewrite")
    raw = read_text(chain.path)
    bom = raw.startswith("\ufeff")
    crlf = "\r\n" in raw
    text = raw.removeprefix("\ufeff").replace("\r\n", "\n")
    new = buffered_text(chain, placement, text, out_path)
    try:
        back = load_chain_text(new, os.path.abspath(out_path))
    except SpecError as exc:
        raise UsageError(f"the buffered spec would not read back at {out_path} ({exc}); "
                         "write it inside the project, e.g. next to the original") from None
    want = [buffer_names(chain)[r] for r in placement] + \
        [bias_names(chain)[r] for r, c in placement.items() if c.input_bias is not None]
    missing = [n for n in want if n not in [s.name for s in back.stages]]
    if missing:
        raise UsageError(f"internal check failed: buffers {', '.join(missing)} missing from the written spec")
    if crlf:
        new = new.replace("\n", "\r\n")
    return (("\ufeff" if bom else "") + new).encode("utf-8")
