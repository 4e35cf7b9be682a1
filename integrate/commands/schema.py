"""``integrate schema``: write the JSON Schema files of both mapping-file formats."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser(
        "schema", help="write JSON Schema files for the mapping files, so editors can complete and check them"
    )
    cmd.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    cmd.add_argument("--out", help="folder for the schema files (default: WORKSPACE/schemas)")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..errors import InputError, InputErrors
    from ..mapping.load import load_canonical
    from ..mapping.schema_export import MODELINE, SCHEMA_FILES, SCHEMAS_DIR, write_schemas
    from ..workspace import CANONICAL_FILE, MAPPINGS_DIR

    root = Path(args.workspace)
    canonical_file = root / MAPPINGS_DIR / CANONICAL_FILE
    fields: list[str] = []
    if canonical_file.exists():
        try:
            fields = list(load_canonical(canonical_file, str(canonical_file)).fields)
        except (InputError, InputErrors) as exc:
            print(f"warning: canonical fields left out of the source schema: {exc}", file=sys.stderr)
    out_dir = Path(args.out) if args.out else root / SCHEMAS_DIR
    for path in write_schemas(out_dir, fields):
        print(f"wrote {path}")
    print("Point a mapping file at its schema with a first line such as:")
    print("  " + MODELINE.format(file=SCHEMA_FILES["source"]))
    return 0
