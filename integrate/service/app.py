"""The service's FastAPI app: workspaces, uploads, runs as jobs, results, and (``review_api``) review.

Every route is under ``/api/v1``; ``/docs`` is the API's documentation page (served from this
package, nothing from elsewhere) and ``/openapi.json`` its OpenAPI document. Reads need a
reader token unless the server was started with ``open_reads``; writes need a token of the
role the route names (reviewer: decisions; admin: uploads and runs). Errors are always JSON
(``ErrorBody``).
"""

from __future__ import annotations

import asyncio
import contextlib
import hashlib
import json
import logging
import threading
from pathlib import Path
from typing import Annotated, Any

from fastapi import Depends, FastAPI, Query, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import FileResponse, HTMLResponse, JSONResponse, Response, StreamingResponse
from starlette.exceptions import HTTPException as StarletteHTTPException

from ..errors import InputError, InputErrors, IntegrateError
from ..mapping.load import file_hash
from ..pipeline import STAGES
from .answer_cache import CachedAnswers
from .auth import Auth, AuthError, bearer
from .context import WorkspaceContext, workspace_names
from .docs_page import docs_html
from .models import (
    CrosswalkEntry,
    EntityStory,
    ErrorBody,
    Job,
    JobList,
    MappingFileInfo,
    Principal,
    RunInfo,
    RunList,
    SearchResult,
    SourceInfo,
    UploadResult,
    WorkspaceInfo,
    WorkspaceSummary,
)
from .results import TABLES, plain
from .security import BodyTooLarge, Guard, allowed_hosts
from .uploads import check_mapping_upload, mapping_target, publish, source_target, stream_to_temp

log = logging.getLogger(__name__)
PREFIX = "/api/v1"
DEFAULT_UPLOAD_LIMIT = 200 * 1024 * 1024
JSON_LIMIT = 1024 * 1024
ERRORS: dict[int | str, dict[str, Any]] = {code: {"model": ErrorBody} for code in (400, 401, 403, 404, 409, 413,
                                                                                   422)}


class ApiError(Exception):
    def __init__(self, status: int, reason: str, message: str, hint: str | None = None, **extra: Any) -> None:
        super().__init__(message)
        self.status, self.reason, self.message, self.hint, self.extra = status, reason, message, hint, extra


def _error_json(status: int, reason: str, message: str, hint: str | None = None, errors: list[dict] | None = None,
                **extra: Any) -> JSONResponse:
    body = {"error": {"reason": reason, "message": message, "hint": hint}, "errors": errors or [], **extra}
    return JSONResponse(status_code=status, content=body, headers={"Cache-Control": "no-store"})


def _input_errors(exc: InputError | InputErrors) -> list[dict[str, Any]]:
    return [e.as_dict() for e in (exc.errors if isinstance(exc, InputErrors) else [exc])]


def _job_model(row: dict[str, Any]) -> Job:
    total = row.get("stages_total") or len(STAGES)
    done = min(int(row.get("stage_index") or 0), total)
    if row["state"] == "succeeded":
        done = total
    return Job(**{k: row.get(k) for k in Job.model_fields if k not in ("stages", "progress")},
               stages=list(STAGES), progress=round(done / total, 4) if total else 0.0)


def _run_model(run: Any) -> RunInfo:
    return RunInfo(run_id=run.run_id, started_at=run.started_at, finished_at=run.finished_at, records=run.records,
                   entities=run.entities, output_dir=run.output_dir, report=run.report, summary=run.summary)


def create_app(workspaces: list[str | Path], *, host: str = "127.0.0.1", port: int = 8000, open_reads: bool = False,
               cors_origins: list[str] | None = None, upload_limit: int = DEFAULT_UPLOAD_LIMIT,
               session_tokens: dict[str, Principal] | None = None) -> FastAPI:
    """The service over the given workspace folders (see the module docstring).

    ``session_tokens`` adds tokens that live only as long as this app (the review page's).
    """
    roots = [Path(w) for w in workspaces]
    contexts = {name: WorkspaceContext.open(name, root) for name, root in zip(workspace_names(roots), roots)}
    for ctx in contexts.values():
        failed = ctx.jobs.recover()
        if failed:
            log.warning("%s: %d run job(s) of a stopped server marked failed", ctx.name, failed)
    auth = Auth(contexts, open_reads=open_reads, session=session_tokens or {})
    for ctx in contexts.values():  # load the outputs before the first look-up asks for them
        threading.Thread(target=ctx.warm, daemon=True).start()

    @contextlib.asynccontextmanager
    async def lifespan(_app: FastAPI) -> Any:
        yield
        for ctx in contexts.values():  # shutting down: running jobs are cancelled before their next stage
            await asyncio.to_thread(ctx.jobs.stop_all)

    app = FastAPI(lifespan=lifespan, title="integrate service", version="1", docs_url=None, redoc_url=None,
                  dependencies=[Depends(bearer)],
                  description="Runs, results and review of integrate workspaces. Authenticate with "
                              "`Authorization: Bearer <token>` (tokens: `integrate serve token create`).")
    app.state.contexts = contexts
    app.state.auth = auth
    own = {f"http://{h}" for h in allowed_hosts(host, port)}
    origins = own | set(cors_origins or [])
    # innermost of the middleware: look-ups answered before already are sent again from their bytes
    app.add_middleware(CachedAnswers, contexts=contexts, auth=auth)
    if cors_origins:
        from fastapi.middleware.cors import CORSMiddleware

        app.add_middleware(CORSMiddleware, allow_origins=list(cors_origins), allow_methods=["GET", "POST", "PUT"],
                           allow_headers=["Authorization", "Content-Type"])
    app.add_middleware(Guard, hosts=allowed_hosts(host, port), origins=origins, json_limit=JSON_LIMIT,
                       upload_limit=upload_limit, content_policy=CONTENT_POLICY)

    @app.exception_handler(ApiError)
    async def _api_error(_r: Request, exc: ApiError) -> JSONResponse:
        return _error_json(exc.status, exc.reason, exc.message, exc.hint, **exc.extra)

    @app.exception_handler(AuthError)
    async def _auth_error(_r: Request, exc: AuthError) -> JSONResponse:
        headers = {"WWW-Authenticate": "Bearer"} if exc.status == 401 else {}
        response = _error_json(exc.status, exc.reason, exc.message, exc.hint)
        response.headers.update(headers)
        return response

    @app.exception_handler(InputErrors)
    @app.exception_handler(InputError)
    async def _input_error(_r: Request, exc: InputError | InputErrors) -> JSONResponse:
        errors = _input_errors(exc)
        first = errors[0]
        status = 404 if first["reason"] in ("unknown_source", "no_outputs", "missing_file") else 422
        if first["reason"] == "too_large":
            status = 413
        elif first["reason"] == "unsafe_path":
            status = 400
        return _error_json(status, str(first["reason"]), str(exc), first.get("hint"), errors=errors)

    @app.exception_handler(IntegrateError)
    async def _integrate_error(_r: Request, exc: IntegrateError) -> JSONResponse:
        return _error_json(500 if type(exc) is IntegrateError else 503, "server_state", str(exc))

    @app.exception_handler(RequestValidationError)
    async def _validation(_r: Request, exc: RequestValidationError) -> JSONResponse:
        errors = [{"reason": "bad_request", "message": str(e.get("msg")),
                   "column": ".".join(map(str, e.get("loc", ()))), "file": None, "line": None, "value": None,
                   "hint": None} for e in exc.errors()]
        return _error_json(422, "bad_request", "the request does not match the API: "
                           + "; ".join(f"{e['column']}: {e['message']}" for e in errors)[:2000], errors=errors)

    @app.exception_handler(StarletteHTTPException)
    async def _http(_r: Request, exc: StarletteHTTPException) -> JSONResponse:
        reason = {404: "not_found", 405: "method_not_allowed"}.get(exc.status_code, "http_error")
        return _error_json(exc.status_code, reason, str(exc.detail))

    @app.exception_handler(Exception)
    async def _crash(_r: Request, exc: Exception) -> JSONResponse:
        if isinstance(exc, BodyTooLarge):
            return _error_json(413, "too_large", f"the request body is over the limit of {exc.limit} bytes")
        log.exception("internal error")
        return _error_json(500, "internal_error", f"internal error ({type(exc).__name__}); see the server's log")

    def ctx_of(name: str) -> WorkspaceContext:
        ctx = contexts.get(name)
        if ctx is None:
            raise ApiError(404, "unknown_workspace", f"no workspace named '{name}'",
                           "served workspaces: " + ", ".join(contexts))
        return ctx


    # -- documentation ------------------------------------------------------------------------
    @app.get("/docs", include_in_schema=False)
    def docs() -> HTMLResponse:
        return HTMLResponse(docs_html(app.openapi()))

    @app.get("/docs/docs.css", include_in_schema=False)
    def docs_css() -> Response:
        from .docs_page import DOCS_CSS

        return Response(DOCS_CSS, media_type="text/css")

    @app.get(f"{PREFIX}/me", response_model=Principal, responses=ERRORS, tags=["auth"])
    def me(request: Request) -> Principal:
        """Who the token belongs to and its role."""
        return auth.check(request, None, "reader")

    # -- workspaces ---------------------------------------------------------------------------
    @app.get(f"{PREFIX}/workspaces", response_model=list[WorkspaceSummary], responses=ERRORS, tags=["workspaces"])
    def list_workspaces(request: Request) -> list[WorkspaceSummary]:
        """The workspaces this server serves, each with its last run."""
        who = auth.check(request, None, "reader")
        out = []
        for ctx in contexts.values():
            if not auth.may_see(who, ctx):
                continue
            last = ctx.runs.last_run()
            out.append(WorkspaceSummary(name=ctx.name, sources=len(ctx.workspace().sources),
                                        last_run=_run_model(last) if last else None))
        return out

    @app.get(f"{PREFIX}/workspaces/{{ws}}", response_model=WorkspaceInfo, responses=ERRORS, tags=["workspaces"])
    def workspace_info(ws: str, request: Request) -> WorkspaceInfo:
        """Sources (file, format, size, SHA-256, last read) and mapping files of a workspace."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        loaded = ctx.workspace()
        last = ctx.runs.last_run()
        read_at: dict[str, str] = {}
        for run in ctx.runs.runs():
            for f in ctx.runs.files(run.run_id).itertuples():
                if f.kind == "input":
                    read_at[f.path] = run.started_at
        sources = []
        for entry in loaded.sources:
            path = entry.data_path(ctx.root)
            shown = loaded.display(path) if path is not None else None
            exists = path is not None and path.is_file()
            sources.append(SourceInfo(name=entry.mapping.source, format=str(entry.mapping.read.format),
                                      file=shown, size=path.stat().st_size if exists else None,
                                      sha256=file_hash(path) if exists else None,
                                      last_read=read_at.get(shown or ""),
                                      mapping_file=loaded.display(entry.mapping_file)))
        mappings = [MappingFileInfo(file=loaded.display(p), size=p.stat().st_size, sha256=file_hash(p))
                    for p in [loaded.canonical_file] + [e.mapping_file for e in loaded.sources]]
        return WorkspaceInfo(name=ctx.name, root=str(ctx.root.resolve()), sources=sources, mappings=mappings,
                             last_run=_run_model(last) if last else None)

    # -- uploads ------------------------------------------------------------------------------
    async def _upload(request: Request, target: Path, ctx: WorkspaceContext) -> tuple[Path, int]:
        form_type = request.headers.get("content-type", "")
        if form_type.startswith("multipart/form-data"):
            temp = await _multipart_to_temp(request, target, upload_limit)
        else:
            temp = await stream_to_temp(request.stream(), target, upload_limit)
        return temp, temp.stat().st_size

    @app.put(f"{PREFIX}/workspaces/{{ws}}/sources/{{source}}/file", response_model=UploadResult,
             responses=ERRORS, tags=["uploads"])
    async def upload_source(ws: str, source: str, request: Request) -> UploadResult:
        """Replace a source's export (multipart field ``file``, or the raw body); written whole or not at all."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "admin")
        target = await asyncio.to_thread(source_target, ctx.root, source)
        temp, size = await _upload(request, target, ctx)
        digest = await asyncio.to_thread(file_hash, temp)
        await asyncio.to_thread(publish, temp, target)
        return UploadResult(file=ctx.workspace().display(target), size=size, sha256=digest)

    @app.put(f"{PREFIX}/workspaces/{{ws}}/mappings/{{name}}", response_model=UploadResult, responses=ERRORS,
             tags=["uploads"])
    async def upload_mapping(ws: str, name: str, request: Request) -> UploadResult:
        """Add or replace a mapping file, only if ``integrate check`` finds no error with it in place."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "admin")
        target = mapping_target(ctx.root, name)
        temp, size = await _upload(request, target, ctx)
        try:
            problems = await asyncio.to_thread(check_mapping_upload, ctx.root, name, temp)
            if problems:
                errors = [{"reason": f.code, "message": f.message, "file": f.file, "line": f.line,
                           "column": f.column, "value": None, "hint": f.hint} for f in problems]
                raise ApiError(422, "mapping_rejected", f"{len(problems)} error(s) with {name} in place; "
                               "nothing was changed: " + "; ".join(str(f) for f in problems[:5]),
                               "fix the file and upload it again", errors=errors)
            digest = await asyncio.to_thread(file_hash, temp)
            await asyncio.to_thread(publish, temp, target)
        finally:
            temp.unlink(missing_ok=True)
        return UploadResult(file=f"mappings/{name}", size=size, sha256=digest)

    # -- runs as jobs -------------------------------------------------------------------------
    @app.post(f"{PREFIX}/workspaces/{{ws}}/runs", response_model=Job, status_code=202, responses=ERRORS,
              tags=["runs"])
    async def start_run(ws: str, request: Request,
                        incremental: Annotated[bool, Query(description=(
                            "build on the last run: only new and changed records are standardised and "
                            "compared, and the last run's model scores the pairs"))] = False,
                        refit: Annotated[bool, Query(description=(
                            "with incremental: estimate the model again"))] = False) -> Any:
        """Start a run in the background; 409 with the running job when one is under way."""
        ctx = ctx_of(ws)
        who = auth.check(request, ctx, "admin")
        # started from the event loop's thread, which lives as long as the server (the worker dies with it)
        job, created = ctx.jobs.start(who.name, incremental=incremental, refit=refit)
        if not created:
            raise ApiError(409, "run_in_progress", f"a run is already {job['state']} (job {job['job_id']})",
                           "wait for it or cancel it", job=_job_model(job).model_dump())
        return _job_model(job)

    @app.get(f"{PREFIX}/workspaces/{{ws}}/jobs", response_model=JobList, responses=ERRORS, tags=["runs"])
    def list_jobs(ws: str, request: Request, limit: Annotated[int, Query(ge=1, le=500)] = 50) -> JobList:
        """Recent run jobs, newest first."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        return JobList(jobs=[_job_model(j) for j in ctx.jobs.store.list(limit)])

    def _job(ctx: WorkspaceContext, job_id: str) -> dict[str, Any]:
        job = ctx.jobs.store.get(job_id)
        if job is None:
            raise ApiError(404, "unknown_job", f"no job '{job_id}' in workspace '{ctx.name}'")
        return job

    @app.get(f"{PREFIX}/workspaces/{{ws}}/jobs/{{job_id}}", response_model=Job, responses=ERRORS, tags=["runs"])
    def get_job(ws: str, job_id: str, request: Request) -> Job:
        """A job's state, stage, progress, timings and error."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        return _job_model(_job(ctx, job_id))

    @app.post(f"{PREFIX}/workspaces/{{ws}}/jobs/{{job_id}}/cancel", response_model=Job, responses=ERRORS,
              tags=["runs"])
    def cancel_job(ws: str, job_id: str, request: Request) -> Job:
        """Ask a job to stop; it stops before its next stage (the previous outputs stay)."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "admin")
        _job(ctx, job_id)
        return _job_model(ctx.jobs.cancel(job_id) or {})

    @app.get(f"{PREFIX}/workspaces/{{ws}}/jobs/{{job_id}}/events", responses={
        **ERRORS, 200: {"content": {"text/event-stream": {"schema": {"type": "string"}}},
                        "description": "server-sent events: `progress` with the job (JSON) on each change, "
                                       "then `end`"}}, tags=["runs"])
    async def job_events(ws: str, job_id: str, request: Request) -> StreamingResponse:
        """The job's progress as server-sent events, until it ends."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        await asyncio.to_thread(_job, ctx, job_id)

        async def events() -> Any:
            last = None
            while True:
                job = await asyncio.to_thread(ctx.jobs.store.get, job_id)
                text = _job_model(job or {}).model_dump_json()
                if text != last:
                    last = text
                    yield f"event: progress\ndata: {text}\n\n"
                if job is None or job["state"] not in ("queued", "running"):
                    yield f"event: end\ndata: {text}\n\n"
                    return
                if await request.is_disconnected():
                    return
                await asyncio.sleep(0.2)

        return StreamingResponse(events(), media_type="text/event-stream", headers={"Cache-Control": "no-store"})

    # -- results ------------------------------------------------------------------------------
    async def _outputs(ctx: WorkspaceContext) -> Any:
        """The current output set: from memory on the event loop, or checked/loaded in a thread (never blocking)."""
        return ctx.results.fresh() or await asyncio.to_thread(ctx.results.get)

    @app.get(f"{PREFIX}/workspaces/{{ws}}/runs", response_model=RunList, responses=ERRORS, tags=["results"])
    def list_runs(ws: str, request: Request) -> RunList:
        """Every recorded run, oldest first, with its change summary."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        return RunList(runs=[_run_model(r) for r in ctx.runs.runs()])

    @app.get(f"{PREFIX}/workspaces/{{ws}}/entities/{{entity_id}}", response_model=EntityStory, responses=ERRORS,
             tags=["results"])
    async def get_entity(ws: str, entity_id: str, request: Request) -> EntityStory:
        """An entity's merged row, member records and provenance per field (as `integrate show`)."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        outputs = await _outputs(ctx)
        answer = outputs.answers.get(("entity", entity_id))
        if answer is None:
            story = outputs.story(entity_id)
            if story is None:
                raise ApiError(404, "unknown_entity", f"entity '{entity_id}' is not in the last run's merged table",
                               "entity IDs are listed in crosswalk.csv and merged.csv")
            answer = outputs.answers.setdefault(("entity", entity_id),
                                                EntityStory(entity_id=entity_id, **story).model_dump_json().encode())
        return Response(answer, media_type="application/json")  # type: ignore[return-value]

    @app.get(f"{PREFIX}/workspaces/{{ws}}/records/{{source}}/{{record_id}}", response_model=CrosswalkEntry,
             responses=ERRORS, tags=["results"])
    async def entity_of_record(ws: str, source: str, record_id: str, request: Request) -> CrosswalkEntry:
        """The entity a source's record belongs to (the crosswalk)."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        outputs = await _outputs(ctx)
        answer = outputs.answers.get(("record", source, record_id))
        if answer is None:
            hit = outputs.entity_of_record(source, record_id)
            if hit is None:
                raise ApiError(404, "unknown_record", f"no record '{record_id}' of source '{source}' in the last run")
            answer = outputs.answers.setdefault(("record", source, record_id), CrosswalkEntry(
                **{k: hit.get(k) for k in CrosswalkEntry.model_fields}).model_dump_json().encode())
        return Response(answer, media_type="application/json")  # type: ignore[return-value]

    @app.get(f"{PREFIX}/workspaces/{{ws}}/entities", response_model=SearchResult, responses=ERRORS,
             tags=["results"])
    def search_entities(ws: str, request: Request, field: Annotated[str, Query(min_length=1, max_length=200)],
                        value: Annotated[str, Query(max_length=1000)],
                        match: Annotated[str, Query(pattern="^(exact|prefix)$")] = "exact",
                        limit: Annotated[int, Query(ge=1, le=1000)] = 50) -> SearchResult:
        """Entities whose merged value of ``field`` is ``value`` (or starts with it); case is ignored."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        found = ctx.results.get().search(field, value, match, limit)
        return SearchResult(field=field, value=value, match=match, count=len(found), entities=found)  # type: ignore[arg-type]

    @app.get(f"{PREFIX}/workspaces/{{ws}}/outputs/{{table}}", responses={
        **ERRORS, 200: {"content": {"text/csv": {}, "application/vnd.apache.parquet": {}},
                        "description": "the table as written by the run"}}, tags=["results"])
    def download(ws: str, table: str, request: Request,
                 format: Annotated[str, Query(pattern="^(csv|parquet)$")] = "csv",  # noqa: A002
                 run: Annotated[int | None, Query(ge=1, le=2**31)] = None) -> FileResponse:
        """An output table of the latest run, or of run ``run`` while its outputs are still on disk."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        if table not in TABLES:
            raise ApiError(404, "unknown_table", f"no output table '{table}'", "tables: " + ", ".join(TABLES))
        folder = _run_folder(ctx, run)
        path = folder / f"{table}.{format}"
        if not path.is_file():
            raise ApiError(404, "no_such_output", f"the run wrote no {table}.{format}")
        media = "text/csv" if format == "csv" else "application/vnd.apache.parquet"
        return FileResponse(path, media_type=media, filename=f"{table}.{format}")

    def _run_folder(ctx: WorkspaceContext, run: int | None) -> Path:
        from .results import current_output_folder

        if run is None:
            return current_output_folder(ctx.root)
        record = ctx.runs.run(run)
        if record is None:
            raise ApiError(404, "unknown_run", f"no run {run} in workspace '{ctx.name}'")
        last = ctx.runs.last_run()
        folder = Path(record.output_dir) if record.output_dir else None
        replaced = last is not None and last.run_id != run and last.output_dir == record.output_dir
        if folder is None or not folder.is_dir() or replaced:
            raise ApiError(404, "outputs_replaced", f"the outputs of run {run} are no longer on disk"
                           + (f" (run {last.run_id} wrote over them)" if replaced and last else ""))
        return folder

    @app.get(f"{PREFIX}/workspaces/{{ws}}/report", responses={**ERRORS, 200: {
        "content": {"text/html": {}}, "description": "the run report"}}, tags=["results"])
    def report(ws: str, request: Request, run: Annotated[int | None, Query(ge=1, le=2**31)] = None) -> Response:
        """The run report (HTML) of the latest run or of run ``run``."""
        ctx = ctx_of(ws)
        auth.check(request, ctx, "reader")
        record = ctx.runs.run(run) if run is not None else ctx.runs.last_run()
        if record is None or not record.report or not Path(record.report).is_file():
            raise ApiError(404, "no_report", "no run report" + (f" for run {run}" if run else " yet"))
        return FileResponse(record.report, media_type="text/html",
                            headers={"Content-Security-Policy": REPORT_POLICY})

    from .review_api import add_review_routes

    add_review_routes(app, contexts, auth, ctx_of, ApiError)

    return app


CONTENT_POLICY = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; "
                  "connect-src 'self'; form-action 'none'; base-uri 'none'; frame-ancestors 'none'")
REPORT_POLICY = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; base-uri 'none'; frame-ancestors 'none'"


async def _multipart_to_temp(request: Request, target: Path, limit: int) -> Path:
    """The ``file`` field of a multipart body, streamed to a temporary file beside ``target``."""
    from starlette.formparsers import MultiPartParser

    parser = MultiPartParser(request.headers, request.stream(), max_files=1, max_fields=10,
                             max_part_size=JSON_LIMIT)
    parser.spool_max_size = 1024 * 1024  # larger parts go to a temporary file, not memory
    form = await parser.parse()
    upload = form.get("file")
    if upload is None or isinstance(upload, str):
        raise ApiError(422, "no_file", "the multipart body has no 'file' part", "send the export as field 'file'")

    async def chunks() -> Any:
        while True:
            chunk = await upload.read(1024 * 1024)
            if not chunk:
                return
            yield chunk

    try:
        return await stream_to_temp(chunks(), target, limit)
    finally:
        await upload.close()


def sha256_of(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def dump(obj: Any) -> str:
    return json.dumps(obj, default=plain)
