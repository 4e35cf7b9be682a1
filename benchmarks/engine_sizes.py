#!/usr/bin/env python3
"""What the Dask engine moves and holds, per record and per pair, on one workspace.

    python benchmarks/engine_sizes.py /tmp/integrate-scale/people-10000

Prints the standardised records' bytes per record (what every worker receives), candidate pairs
per record, the pairs the rules find before they are joined (the shuffle, 24 bytes each), the
scored pairs' bytes per pair (what the driver gathers) and the linked or possibly linked pairs
per record; the README's estimate for 100 million records multiplies these out.
"""

from __future__ import annotations

import sys
from pathlib import Path

from integrate.ids import canonical_order
from integrate.matching import match_records
from integrate.pipeline import read_and_map
from integrate.workspace import load_workspace


def main() -> None:
    ws = load_workspace(Path(sys.argv[1] if len(sys.argv) > 1 else "."))
    records, _ = read_and_map(ws)
    records = canonical_order(records)
    match = match_records(records, ws.canonical, regions={e.mapping.source: e.mapping.region for e in ws.sources})
    n, pairs = len(records), len(match.pairs)
    prepared = match.prepared.memory_usage(deep=True).sum()
    scored = match.pairs.memory_usage(deep=True).sum()
    found = sum(match.blocking.pairs_per_rule.values())
    linked = int((match.pairs["decision"] != "non-link").sum())
    print(f"records {n:,}: standardised {prepared / n:.0f} bytes per record; candidate pairs {pairs:,} "
          f"({pairs / n:.2f} per record); pairs found by the rules before the join {found:,} "
          f"({found / max(pairs, 1):.2f} per candidate pair); scored {scored / max(pairs, 1):.0f} bytes per pair; "
          f"linked or possibly linked {linked / n:.3f} per record")


if __name__ == "__main__":
    main()
