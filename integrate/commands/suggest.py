"""``integrate suggest``: profile a new export and draft its mapping file."""

from __future__ import annotations

import argparse
import sys


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("suggest", help="profile a new export and draft mappings/<name>.yaml for it")
    cmd.add_argument("source_file", metavar="SOURCE_FILE", nargs="?",
                     help="the export (csv, xlsx, json, jsonl, parquet, sqlite)")
    cmd.add_argument("--name", help="source name and mapping file name (default: from the file name)")
    cmd.add_argument("--workspace", default=".", help="workspace folder (default: current folder)")
    cmd.add_argument("--force", action="store_true", help="overwrite an existing mapping file")
    cmd.add_argument("--update", metavar="SOURCE", help="instead: edit SOURCE's existing mapping file for what "
                     "changed in its export since the last run (prints the diff first)")
    cmd.add_argument("--dry-run", action="store_true", help="with --update: print the diff only, write nothing")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    if args.update:
        from .update_mapping import main as update_main

        return update_main(args)
    if not args.source_file:
        print("error: give SOURCE_FILE (a new export to draft a mapping for) or --update SOURCE", file=sys.stderr)
        return 2
    from ..mapping.suggest import suggest_mapping

    draft = suggest_mapping(args.source_file, workspace=args.workspace, name=args.name, force=args.force)
    width = max(len(s.column) for s in draft.columns)
    for s in draft.columns:
        decision = s.field or ("record ID" if s.role == "record_id" else s.role)
        todo = "  TODO" if s.todos else ""
        print(f"  {s.column:<{width}}  -> {decision:<20} {s.confidence:4.2f}{todo}   {s.profile.summary()}")
    todos = sum(len(s.todos) for s in draft.columns)
    print(f"wrote {draft.path} ({todos} TODO{'s' if todos != 1 else ''} to decide); "
          f"then run: integrate check {args.workspace}")
    return 0
