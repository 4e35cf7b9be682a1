"""The Dask engine: blocking, comparison and scoring on a dask.distributed cluster.

The standardised records are sent once to every worker. Then:

1. blocking: one task per rule (``block`` on that rule alone), its pairs cut into partitions by
   ranges of the first record number ``i``;
2. shuffle: one task per partition joins that range's pairs from every rule, one row per pair
   with the rules that found it OR-ed together, sorted by (i, j), so the partitions laid end to
   end are exactly the local engine's pairs, in the same order;
3. comparison (``compare``) on each partition, where the partition lives; each returns its
   distinct grade patterns and their counts, which the driver adds up (EM's pattern counts
   reduced across workers) and fits the model on (``estimate``);
4. scoring (``weigh``) on each partition under the fitted model.

The driver gathers the scored pairs (the pairs output holds them all) and clusters them. Each
pair's grades and weights depend on that pair alone, and the pattern counts are summed in the
local engine's order, so the model and every output are the same as the local engine's.
"""

from __future__ import annotations

import logging
import math
import operator
from collections.abc import Callable

import numpy as np
import pandas as pd

from ..block import SPLIT_BLOCK_SIZE, BlockingReport, block, rule_key
from ..compare import compare
from ..mapping.spec import BlockingRule, CanonicalSchema
from ..score import (
    ScoreModel,
    _level_freq,
    _levels,
    all_pairs_count,
    candidate_mask,
    estimate,
    model_grades,
    pattern_codes,
    random_sample,
    weigh,
)

log = logging.getLogger(__name__)

RECORDS_PER_PARTITION = 50_000  # ranges of i: about this many records' pairs per partition
LOCAL_WORKERS = 2
CONNECT_TIMEOUT = "30s"


def _quiet(_: str) -> None:
    return None


def _rule_partitions(prepared: pd.DataFrame, rule: BlockingRule, bit: int, group_codes: np.ndarray | None,
                     max_block_size: int, order_columns: list[str], bounds: np.ndarray
                     ) -> tuple[list[pd.DataFrame], BlockingReport, np.ndarray | None]:
    """One rule's pairs cut at ``bounds`` of i, its report, and the records in its split blocks."""
    pairs, report = block(prepared, [rule], groups=None if group_codes is None else pd.Series(group_codes),
                          max_block_size=max_block_size, order_columns=order_columns)
    pairs["rules"] = np.int64(1 << bit)
    cuts = np.searchsorted(pairs["i"].to_numpy(), bounds)  # block returns pairs sorted by (i, j)
    parts = [pairs.iloc[a:b].reset_index(drop=True) for a, b in zip(cuts[:-1], cuts[1:])]
    inside = None
    if report.split_blocks:
        key = rule_key(prepared, rule)
        sizes = key.map(key.value_counts())
        inside = (sizes > max(2, min(max_block_size, SPLIT_BLOCK_SIZE))).fillna(False).to_numpy(bool)
    return parts, report, inside


def _join_partition(n: int, *parts: pd.DataFrame) -> pd.DataFrame:
    """One row per pair of this range of i, the masks of the rules that found it OR-ed."""
    allp = pd.concat(parts, ignore_index=True)
    code = allp["i"].to_numpy() * max(n, 1) + allp["j"].to_numpy()
    order = np.argsort(code, kind="stable")
    code, masks = code[order], allp["rules"].to_numpy()[order]
    if not len(code):
        return allp.iloc[:0].reset_index(drop=True)
    starts = np.flatnonzero(np.r_[True, code[1:] != code[:-1]])
    unique = code[starts]
    return pd.DataFrame({"i": (unique // max(n, 1)).astype(np.int64), "j": (unique % max(n, 1)).astype(np.int64),
                         "rules": np.bitwise_or.reduceat(masks, starts).astype(np.int64)})


def _patterns(grades: pd.DataFrame, field_types: dict[str, str]) -> tuple[pd.DataFrame, np.ndarray]:
    """The distinct model-grade patterns of one partition, in order of first appearance, and counts."""
    joint, _ = model_grades(grades, field_types)
    codes = pattern_codes(joint.to_numpy(np.int64))
    first = np.flatnonzero(np.diff(np.maximum.accumulate(codes), prepend=-1) > 0) if len(codes) else codes
    return joint.iloc[first].reset_index(drop=True), np.bincount(codes).astype(float)


def reduce_patterns(summaries: list[tuple[pd.DataFrame, np.ndarray]]) -> tuple[pd.DataFrame, np.ndarray]:
    """Partitions' distinct patterns and counts added up, in order of first appearance over the
    partitions in order (the order the local engine meets them in)."""
    patterns = pd.concat([p for p, _ in summaries], ignore_index=True)
    counts = np.concatenate([c for _, c in summaries]) if summaries else np.zeros(0)
    codes = pattern_codes(patterns.to_numpy(np.int64))
    if not len(codes):
        return patterns, counts
    first = np.flatnonzero(np.diff(np.maximum.accumulate(codes), prepend=-1) > 0)
    return patterns.iloc[first].reset_index(drop=True), np.bincount(codes, weights=counts)


class DaskEngine:
    """Runs on the cluster at ``scheduler`` (an address such as ``tcp://host:8786``), or on a
    LocalCluster of two single-threaded worker processes started here."""

    name = "dask"

    def __init__(self, scheduler: str | None = None, *, workers: int = LOCAL_WORKERS,
                 records_per_partition: int = RECORDS_PER_PARTITION) -> None:
        self.scheduler = scheduler
        self.workers = workers
        self.records_per_partition = records_per_partition
        self.cluster = None
        self.client = None

    def __enter__(self) -> DaskEngine:
        from distributed import Client, LocalCluster

        from . import EngineError

        logging.getLogger("distributed").setLevel(logging.WARNING)  # its start/stop notes are not the user's
        if self.scheduler:
            try:
                self.client = Client(self.scheduler, timeout=CONNECT_TIMEOUT)
            except OSError as err:
                raise EngineError(f"cannot reach the Dask scheduler at {self.scheduler}: {err}") from None
        else:
            # on a loaded machine the workers this run started may take longer than the nanny's
            # few seconds to stop; it then ends them, which is what closing asked for anyway
            logging.getLogger("distributed.nanny").setLevel(logging.ERROR)
            self.cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1, processes=True,
                                        dashboard_address=None)
            self.client = Client(self.cluster)
        return self

    def __exit__(self, *_: object) -> None:
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()
        self.client = self.cluster = None

    def block_compare_score(self, prepared: pd.DataFrame, canonical: CanonicalSchema, rules: list[BlockingRule], *,
                            group_codes: np.ndarray | None, order_columns: list[str],
                            progress: Callable[[str], None] = _quiet,
                            estimator: Callable[..., ScoreModel] | None = None
                            ) -> tuple[pd.DataFrame, BlockingReport, ScoreModel]:
        client = self.client
        assert client is not None, "use the engine inside 'with'"
        n = len(prepared)
        count = getattr(progress, "count", None)
        [records] = client.scatter([prepared], broadcast=True)
        parts = max(2 * len(client.scheduler_info()["workers"]), math.ceil(n / self.records_per_partition), 1)
        bounds = np.linspace(0, n, parts + 1).round().astype(np.int64)
        by_rule = [client.submit(_rule_partitions, records, rule, bit, group_codes, canonical.max_block_size,
                                 order_columns, bounds, pure=False) for bit, rule in enumerate(rules)]
        pieces = [[client.submit(operator.getitem, client.submit(operator.getitem, r, 0), k) for r in by_rule]
                  for k in range(parts)]
        pairs = [client.submit(_join_partition, n, *row) for row in pieces]
        sample_pairs = client.submit(random_sample, records, group_codes)
        sample = client.submit(compare, records, sample_pairs, canonical)
        reports = client.gather([client.submit(lambda r: r[1:], r) for r in by_rule])
        progress("compare")
        grades = [client.submit(compare, records, p, canonical) for p in pairs]
        columns = client.submit(lambda g: list(g.columns), grades[0]).result()
        field_types = {f: canonical.fields[f].type for f in columns}
        summaries = [client.submit(_patterns, g, field_types) for g in grades]
        done = 0
        gathered = []
        for k, future in enumerate(summaries):
            gathered.append(future.result())
            done += int(gathered[-1][1].sum())
            if count is not None:
                count(k + 1, parts, "partitions")
        progress("score")
        patterns, pattern_counts = reduce_patterns(gathered)
        random_joint, types = model_grades(sample.result(), field_types)
        u_random = {f: _level_freq(random_joint[f].to_numpy(np.int64), _levels(types[f])) for f in random_joint}
        if done == 0 or estimator is not None:
            # no pairs, or review decisions (their estimator needs every pair): fit on the driver as
            # the local engine does, from the gathered pairs and grades
            from ..score import score

            all_pairs = pd.concat(client.gather(pairs), ignore_index=True)
            all_grades = pd.concat(client.gather(grades), ignore_index=True)
            _, model = score(prepared, all_pairs, canonical, groups=group_codes, grades=all_grades,
                             estimator=estimator)
        else:
            n_other = max(all_pairs_count(n, group_codes) - done, 0)
            # the sampled pairs some partition holds are candidates, not background (see estimate)
            held = np.logical_or.reduce(client.gather([client.submit(candidate_mask, sample_pairs, p) for p in pairs]))
            background = random_joint[~held].reset_index(drop=True)
            model = estimate(patterns, types, u_random, background, n_other / max(len(background), 1),
                             counts=pattern_counts, records=n)
        scored_parts = [client.submit(weigh, records, p, g, field_types, model, canonical.thresholds)
                        for p, g in zip(pairs, grades)]
        scored = pd.concat(client.gather(scored_parts), ignore_index=True)
        return scored, self._report(rules, reports, scored, n, group_codes), model

    @staticmethod
    def _report(rules: list[BlockingRule], reports: list[tuple[BlockingReport, np.ndarray | None]],
                scored: pd.DataFrame, n: int, group_codes: np.ndarray | None) -> BlockingReport:
        """The blocking report of all rules together, as ``block`` on every rule would give it."""
        masks = scored["rules"].to_numpy()
        names = [r.name for r in rules]
        has_pair = np.zeros(n, bool)
        has_pair[scored["i"].to_numpy()] = True
        has_pair[scored["j"].to_numpy()] = True
        split = []
        for report, inside in reports:
            for rule, values, top, _ in report.split_blocks:
                alone = int((inside & ~has_pair).sum()) if inside is not None else 0
                log.warning("blocking rule '%s': %d key values are shared by more than %d records (largest: %s); "
                            "each was split by a sorted neighbourhood inside it; %d of their records have no "
                            "candidate pair", rule, values, SPLIT_BLOCK_SIZE,
                            ", ".join(f"'{t}' ({c})" for t, c in top), alone)
                split.append((rule, values, top, alone))
        return BlockingReport(
            names,
            {r: int(((masks >> b) & 1).sum()) for b, r in enumerate(names)},
            {r: int((masks == (1 << b)).sum()) for b, r in enumerate(names)},
            {name: report.largest_blocks[name] for (report, _), name in zip(reports, names)},
            [s for report, _ in reports for s in report.skipped_blocks],
            len(scored), all_pairs_count(n, group_codes), split_blocks=split)
