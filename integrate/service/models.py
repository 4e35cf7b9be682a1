"""The service's request and response bodies (pydantic), as the OpenAPI document shows them."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field

JobState = Literal["queued", "running", "succeeded", "failed", "cancelled"]
Queue = Literal["possible", "audit"]
Decision = Literal["same", "different", "defer"]
ClusterChoice = Literal["keep together", "split"]
Name = Field(min_length=1, max_length=200)


class ErrorDetail(BaseModel):
    reason: str
    message: str
    file: str | None = None
    line: int | None = None
    column: int | str | None = None
    value: str | None = None
    hint: str | None = None


class ErrorBody(BaseModel):
    error: ErrorDetail
    errors: list[ErrorDetail] = []  # every problem, when there are several (a mapping upload)
    existing: dict[str, Any] | None = None  # 409 on a decision: the decision that stands
    job: dict[str, Any] | None = None  # 409 on a run: the job already running


class Principal(BaseModel):
    name: str
    role: Literal["reader", "reviewer", "admin", "anonymous"]


class SourceInfo(BaseModel):
    name: str
    format: str
    file: str | None  # None for a database read by URL
    size: int | None
    sha256: str | None
    last_read: str | None  # when the last run that read this file started (ISO 8601)
    mapping_file: str


class MappingFileInfo(BaseModel):
    file: str
    size: int
    sha256: str


class RunInfo(BaseModel):
    run_id: int
    started_at: str
    finished_at: str
    records: int
    entities: int
    output_dir: str | None
    report: str | None
    summary: dict[str, Any]


class WorkspaceSummary(BaseModel):
    name: str
    sources: int
    last_run: RunInfo | None


class WorkspaceInfo(BaseModel):
    name: str
    root: str
    sources: list[SourceInfo]
    mappings: list[MappingFileInfo]
    last_run: RunInfo | None


class Job(BaseModel):
    job_id: str
    state: JobState
    stage: str | None
    stage_index: int
    stages_total: int
    stages: list[str]
    progress: float = Field(ge=0, le=1)  # stages finished / stages
    timings: dict[str, float]  # seconds per finished stage
    created_at: str
    started_at: str | None
    finished_at: str | None
    error: str | None  # the message as `integrate run` prints it
    run_id: int | None
    cancel_requested: bool
    requested_by: str | None


class JobList(BaseModel):
    jobs: list[Job]


class RunList(BaseModel):
    runs: list[RunInfo]


class EntityStory(BaseModel):
    entity_id: str
    merged: dict[str, Any]
    members: list[dict[str, Any]]
    provenance: list[dict[str, Any]]
    cluster: dict[str, Any] | None


class CrosswalkEntry(BaseModel):
    source: str
    record_id: str
    entity_id: str
    link_strength: float | None = None


class SearchResult(BaseModel):
    field: str
    value: str
    match: Literal["exact", "prefix"]
    count: int
    entities: list[dict[str, Any]]


class UploadResult(BaseModel):
    file: str
    size: int
    sha256: str


# -- review --------------------------------------------------------------------------------------
class PairKey(BaseModel):
    source_a: str
    record_id_a: str
    source_b: str
    record_id_b: str


class RecordEnd(BaseModel):
    source: str
    record_id: str
    as_of: str
    trust: int | None
    entity_id: str | None = None


class FieldCompare(BaseModel):
    name: str
    type: str
    a: str
    b: str
    a_parts: list[tuple[str, bool]]
    b_parts: list[tuple[str, bool]]
    grade: str | None
    weight: float | None
    weight_note: str
    compared: bool


class PairItem(BaseModel):
    key: PairKey
    id: str
    kind: Queue
    probability: float
    weight: float
    run_decision: str
    blocking_rules: str
    records: list[RecordEnd]
    fields: list[FieldCompare]
    reason: str
    uncertainty: float | None
    decision: dict[str, Any] | None = None  # the standing decision on the pair, if any


class QueueProgress(BaseModel):
    total: int
    decided: int
    deferred: int
    remaining: int


class ClusterRecord(BaseModel):
    source: str
    record_id: str
    as_of: str
    trust: int | None
    entity_id: str | None  # its entity in the last run
    part: Literal["A", "B"]  # the side of the proposed split it falls on
    values: dict[str, str]  # canonical field -> value as shown ('' when missing)


class ClusterField(BaseModel):
    name: str
    type: str
    varies: bool  # the records hold more than one value in it


class ClusterPair(BaseModel):
    key: PairKey
    probability: float
    run_decision: str
    where: Literal["inside part A", "inside part B", "across the split"]
    proposed_cut: bool  # the link the proposed split cuts
    decision: Decision | None  # the standing decision on the pair, if any
    decided_by: str | None


class ClusterDecisionRow(BaseModel):
    id: int
    cluster_id: str
    choice: ClusterChoice
    reviewer: str
    decided_at: str
    note: str | None
    parts: dict[str, list[list[str]]]  # "A" and "B": [source, record ID] of each record
    decisions: list[DecisionRow] = []  # the pairwise decisions it stored (or undid)


class ClusterItem(BaseModel):
    cluster_id: str
    entity_ids: list[str]
    proposal: Literal["run cut", "weakest link"]  # where the proposed split comes from
    reason: str
    anchor: PairKey  # the link the proposed split cuts; the queue lists the cluster under it
    probability: float  # the anchor's match probability
    records: list[ClusterRecord]
    fields: list[ClusterField]
    pairs: list[ClusterPair]  # candidate pairs inside the cluster, strongest first
    part_a: int
    part_b: int
    decision: ClusterDecisionRow | None = None  # the standing decision on the whole cluster, if any


class NextResponse(BaseModel):
    item: PairItem | None
    progress: QueueProgress
    cluster: ClusterItem | None = None  # set when the item is a suspicious cluster (reviewed as a whole)


class NextRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")

    queue: Queue = "possible"
    source: str | None = Field(None, max_length=200)
    field: str | None = Field(None, max_length=200)
    skip: PairKey | None = None


class QueueEntry(BaseModel):
    source_a: str
    record_id_a: str
    source_b: str
    record_id_b: str
    probability: float
    state: Literal["open", "deferred", "decided"]
    cluster_id: str | None = None  # a suspicious cluster, listed under the link its proposed split cuts


class QueueResponse(BaseModel):
    queue: Queue
    progress: QueueProgress
    possible_links: int  # of the queue, pairs in the band between the thresholds
    weakest_links: int  # ... and suspicious clusters (each under the link its proposed split cuts)
    items: list[QueueEntry]


class DecisionRequest(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    source_a: str = Name
    record_id_a: str = Name
    source_b: str = Name
    record_id_b: str = Name
    decision: Decision
    note: str | None = Field(None, max_length=4000)
    queue: Queue = "possible"


class DecisionRow(BaseModel):
    id: int
    source_a: str
    record_id_a: str
    source_b: str
    record_id_b: str
    decision: Decision
    reviewer: str
    decided_at: str
    note: str | None
    probability: float | None
    weight: float | None
    run_decision: str | None
    scores: str | None
    origin: str
    revision: int


class DecisionResponse(BaseModel):
    decision: DecisionRow


class UndoRequest(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    decision_id: int | None = None  # default: your most recent standing decision
    queue: Queue = "possible"


class UndoResponse(BaseModel):
    undone: DecisionRow
    item: PairItem | None
    cluster_decision: ClusterDecisionRow | None = None  # the pair was part of it: all of it was undone


class RecordRef(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    source: str = Name
    record_id: str = Name


class ClusterDecisionRequest(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    choice: ClusterChoice
    part_a: list[RecordRef] | None = Field(None, max_length=10000)  # a split other than the proposed one
    note: str | None = Field(None, max_length=4000)
    queue: Queue = "possible"


class ClusterDecisionResponse(BaseModel):
    cluster_decision: ClusterDecisionRow


class ClusterUndoRequest(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    cluster_decision_id: int | None = None  # default: your most recent cluster decision


class ClusterUndoResponse(BaseModel):
    undone: ClusterDecisionRow
    cluster: ClusterItem | None


class DecisionList(BaseModel):
    decisions: list[DecisionRow]


class ImportResult(BaseModel):
    added: int
    unchanged: int
    conflicts: list[dict[str, Any]]


class Shortcut(BaseModel):
    key: str
    action: str


class ReviewSession(BaseModel):
    workspace: str
    reviewer: str
    role: str
    queue: Queue
    sources: list[str]
    fields: list[str]
    trust: dict[str, int]
    as_of: dict[str, str]
    shortcuts: list[Shortcut]
    notes: dict[str, str]  # explanations the page shows (trust rank, why the queue is long)
