"""``integrate init DIR``: scaffold a workspace (canonical schema, schema files, empty mappings/)."""

from __future__ import annotations

import argparse


def register(sub: argparse._SubParsersAction) -> None:
    cmd = sub.add_parser("init", help="start a workspace: a canonical.yaml of common person fields, the "
                         "schema files, an empty mappings/ folder for the sources")
    cmd.add_argument("folder", help="the workspace folder (created if missing)")
    cmd.add_argument("--currency", default="EUR", help="base currency, ISO 4217 (default EUR)")
    cmd.add_argument("--region", default="GB", help="default phone country, ISO 3166 (default GB)")
    cmd.add_argument("--force", action="store_true", help="replace an existing canonical.yaml")
    cmd.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..mapping.scaffold import init_workspace

    for path in init_workspace(args.folder, currency=args.currency, region=args.region, force=args.force):
        print(f"wrote {path}")
    print(f"next: integrate suggest EXPORT --workspace {args.folder}   (one per export), then integrate check")
    return 0
