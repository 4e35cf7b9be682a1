"""``integrate review``: review suspected duplicates in the browser or the terminal; move decisions."""

from __future__ import annotations

import argparse
import getpass
from pathlib import Path

from ..errors import InputError
from .serve import port_number


def _default_reviewer() -> str:
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no user name in this environment
        return "reviewer"


def register(sub: argparse._SubParsersAction) -> None:
    rv = sub.add_parser("review", help="review the possible links of the last run (page or terminal)",
                        description="Start the review page for the last run's possible links, or review them in "
                                    "the terminal; move decisions between workspaces; audit automatic links.")
    rv.add_argument("workspace", nargs="?", default=".", help="workspace folder (default: current folder)")
    rv.add_argument("--host", default="127.0.0.1", help="address to listen on (default: 127.0.0.1, this machine only)")
    rv.add_argument("--port", type=port_number, default=8765, help="port to listen on (default: 8765)")
    rv.add_argument("--reviewer", default=None, help="your name, stored with every decision (default: login name)")
    rv.add_argument("--terminal", action="store_true", help="review in this terminal instead of a browser")
    rv.add_argument("--source", help="terminal: only pairs with a record from this source")
    rv.add_argument("--field", help="terminal: only pairs whose records differ in this field")
    what = rv.add_mutually_exclusive_group()
    what.add_argument("--export", metavar="FILE", help="write every decision to a CSV file and stop")
    what.add_argument("--import", dest="import_file", metavar="FILE", help="add the decisions in a CSV file and stop")
    what.add_argument("--audit", metavar="N", type=int,
                      help="draw N automatic links at random (seeded) and review them, to estimate precision")
    rv.add_argument("--seed", type=int, default=None, help="seed for --audit (default: a fixed seed)")
    rv.set_defaults(func=main)


def main(args: argparse.Namespace) -> int:
    from ..review.queue import AUDIT, POSSIBLE
    from ..review.store import DecisionStore
    from ..workspace import load_workspace

    ws = load_workspace(args.workspace)  # a clear error when this is not a workspace
    store = DecisionStore.for_workspace(ws.root)
    if args.export:
        from ..review.transfer import export_decisions

        count = export_decisions(store, args.export)
        print(f"wrote {count} decisions to {args.export}")
        return 0
    if args.import_file:
        from ..review.transfer import import_decisions

        summary = import_decisions(store, args.import_file)
        print(f"added {summary.added} decisions, {summary.unchanged} already there, "
              f"{len(summary.conflicts)} conflicts")
        for c in summary.conflicts[:20]:
            e, new = c["existing"], c["imported"]
            print(f"  conflict: {e['source_a']} {e['record_id_a']} ~ {e['source_b']} {e['record_id_b']}: "
                  f"here '{e['decision']}' by {e['reviewer']}, file '{new['decision']}' by {new['reviewer']} "
                  f"(kept '{e['decision']}')")
        return 1 if summary.conflicts else 0
    kind = POSSIBLE
    if args.audit is not None:
        import pandas as pd

        from ..review.quality import AUDIT_SEED, draw_audit_sample

        if args.audit < 1:
            raise InputError(f"--audit needs a positive number of pairs, not {args.audit}", reason="bad_option")
        from ..outputs.publish import current_output_folder

        pairs_path = current_output_folder(ws.root, default=ws.output_dir) / "pairs.parquet"
        if not pairs_path.exists():
            raise InputError("no candidate pairs from a run", file=str(pairs_path), reason="missing_file",
                             hint="run 'integrate run' on this workspace first")
        seed = AUDIT_SEED if args.seed is None else args.seed
        sample = draw_audit_sample(pd.read_parquet(pairs_path), args.audit, seed, exclude=store.audit_sample())
        added = store.add_audit_sample(sample, seed)
        print(f"drew {added} automatic links at random (seed {seed}); "
              f"{len(store.audit_sample())} in the audit sample in all")
        kind = AUDIT
    reviewer = args.reviewer or _default_reviewer()
    _check_filters(ws, args.source, args.field)
    if args.terminal:
        from ..review.queue import load_review_data
        from ..review.terminal import review_in_terminal

        session = review_in_terminal(load_review_data(ws.root), store, reviewer, kind=kind, source=args.source,
                                     field_name=args.field)
        print("this session: " + ", ".join(f"{k} {v}" for k, v in session.decided.items())
              + f", conflicts {session.conflicts}, undone {session.undone}")
        return 0
    from ..review.app import serve

    serve(Path(ws.root), host=args.host, port=args.port, reviewer=reviewer, kind=kind)
    return 0


def _check_filters(ws: object, source: str | None, field: str | None) -> None:
    """An unknown --source or --field is an error naming the choices, not an empty queue."""
    sources = [e.mapping.source for e in ws.sources]  # type: ignore[attr-defined]
    fields = list(ws.canonical.fields)  # type: ignore[attr-defined]
    if source is not None and source not in sources:
        raise InputError(f"--source '{source}' is not a source of this workspace", value=source,
                         reason="unknown_source", hint="sources: " + ", ".join(sources))
    if field is not None and field not in fields:
        raise InputError(f"--field '{field}' is not a canonical field", value=field, reason="unknown_field",
                         hint="fields: " + ", ".join(fields))
