"""``chainplan schema``: the JSON Schema of chain specs, for YAML-aware editors."""
from __future__ import annotations


def add_arguments(p):
    p.add_argument("-o", "--output", metavar="PATH", help="write the schema to PATH (default: print it)")


def run(args) -> int:
    from ..spec.schema import dumps
    text = dumps()
    if args.output:
        from ..render.files import write_atomic
        write_atomic({args.output: text})
    else:
        print(text, end="")
    return 0
