"""``integrate suggest --update SOURCE [--dry-run]``: print the proposed edits of a mapping file, then write them."""

from __future__ import annotations

import argparse


def main(args: argparse.Namespace) -> int:
    from ..mapping.update import proposals_text, propose_update, write_update

    update = propose_update(args.workspace, args.update)
    if not update.changed:
        print(f"{update.shown}: nothing to change (compared with run {update.previous_run})")
        return 0
    print(update.diff, end="")
    for line in proposals_text(update):
        print(line)
    if args.dry_run:
        print(f"dry run: {update.shown} not changed")
        return 0
    write_update(update)
    todo = f"; {len(update.todo)} TODO(s) left for you" if update.todo else ""
    print(f"updated {update.shown} ({len(update.applied)} edit(s) compared with run {update.previous_run}{todo}); "
          f"then run: integrate check {args.workspace}")
    return 0
