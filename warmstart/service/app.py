"""The HTTP service: a team history behind a JSON API and a read-only web view.

Routes (JSON unless said otherwise; the OpenAPI document is at ``/openapi.json``):

========================  =====  ==============================================
``/health``               GET    status; always open
``/api/info``             GET    :meth:`KnowledgeBase.info`
``/api/datasets``         GET    one row per dataset (size, studies, families)
``/api/datasets/{id}``    GET    fingerprint, studies and nearest neighbours
``/api/studies``          GET    one row per study with its best score
``/api/tables``           GET    the three tables (:meth:`KnowledgeBase.tables`)
``/api/fingerprints``     GET    stored fingerprints by dataset id
``/api/similar``          POST   :meth:`KnowledgeBase.similar` of a fingerprint
``/api/suggest``          POST   :meth:`KnowledgeBase.suggest` for a fingerprint
``/api/log``              POST   :meth:`KnowledgeBase.log` (write token)
``/api/backtest/{fam}``   GET    :func:`warmstart.backtest.backtest`
``/api/check``            GET    :meth:`KnowledgeBase.check` (no repair)
``/api/check/repair``     POST   check with repair (write token)
``/api/write-access``     GET    200 when the token may write (write token)
``/api/map.svg``          GET    the similarity map (SVG)
``/api/map``              POST   the map with a fingerprint placed on it (SVG)
``/``, ``/datasets/{id}``,
``/families/{name}``      GET    the web view (HTML)
========================  =====  ==============================================

Errors are ``{"error": one line, "kind": ...}``: 400 for bad input (the library's own
message), 401/403 for tokens, 404 for an unknown dataset or nothing to suggest, 413 for
a body over the limit, 422 for a request that does not fit the schema (naming the
field), 500 with no detail (the traceback goes to the server's log only).
"""

from __future__ import annotations

import logging
import os
import tempfile
from pathlib import Path
from typing import Any, Literal

from fastapi import FastAPI, Query, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import HTMLResponse, JSONResponse, Response
from pydantic import BaseModel, ConfigDict, Field
from starlette.exceptions import HTTPException

from warmstart import __version__
from warmstart.backtest import DEFAULT_KS, plot_regret
from warmstart.errors import BadInputError, NothingToSuggestError, WarmstartError
from warmstart.families import families, get_family
from warmstart.fingerprint import Fingerprint
from warmstart.service import webview, wire
from warmstart.service.maps import map_svg
from warmstart.service.security import DEFAULT_MAX_BODY_BYTES, Guard, check_token
from warmstart.service.state import HistoryState

log = logging.getLogger("warmstart.service")
Task = Literal["classification", "regression"]


# -- request bodies ---------------------------------------------------------------------------
class _Body(BaseModel):
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)


class SimilarRequest(_Body):
    fingerprint: dict[str, Any] = Field(description="output of 'warmstart fingerprint --json'")
    k: int = Field(5, ge=1, le=1000)


class SuggestRequest(_Body):
    fingerprint: dict[str, Any]
    family: str = Field(min_length=1, max_length=64)
    k: int = Field(10, ge=1, le=1000)
    metric: str | None = Field(None, max_length=64)
    strategy: str | None = Field(None, max_length=64)
    space: list[dict[str, Any]] | None = Field(None, max_length=200)
    max_fit_seconds: float | None = Field(None, ge=0)
    seed: int = Field(0, ge=0, le=2**32 - 1)


class LogRequest(_Body):
    fingerprint: dict[str, Any]
    family: str = Field(min_length=1, max_length=64)
    trials: list[dict[str, Any]] = Field(min_length=1, max_length=100_000)
    metric: str | None = Field(None, max_length=64)
    better: Literal["higher", "lower"] | None = None
    name: str | None = Field(None, min_length=1, max_length=200)
    file_name: str | None = Field(None, min_length=1, max_length=200)
    task: Task | None = None
    source: str = Field("log", pattern=r"^[a-z][a-z0-9_-]{0,31}$")


class MapRequest(_Body):
    fingerprint: dict[str, Any]
    label: str = Field("query", max_length=80)


# -- the application --------------------------------------------------------------------------
def create_app(path: str | os.PathLike, token: str | None = None,
               read_token: str | None = None,
               max_body_bytes: int = DEFAULT_MAX_BODY_BYTES):
    """The service over the history at ``path``, as an ASGI application.

    Parameters
    ----------
    path : path-like
        An existing history directory.
    token : str, optional
        Bearer token that writes need; without one the server takes no writes.
    read_token : str, optional
        When given, reads need it too (or the write token).
    max_body_bytes : int
        Larger request bodies are refused with 413.

    Returns
    -------
    ASGI application
        The FastAPI app (its ``.state.history`` is the :class:`HistoryState`) wrapped in
        the :class:`~warmstart.service.security.Guard` middleware.
    """
    token, read_token = check_token(token, "write token"), check_token(read_token,
                                                                       "read token")
    if max_body_bytes < 1024:
        raise BadInputError("the body size limit must be at least 1024 bytes")
    api = FastAPI(title="warmstart", version=__version__, docs_url=None, redoc_url=None,
                  description="A team's history of hyperparameter studies: similar "
                              "datasets, warm-start suggestions, logging new studies.")
    api.state.history = HistoryState(path)
    api.state.writes = token is not None
    api.state.read_protected = read_token is not None
    for router in (_api_routes, _view_routes):
        router(api)
    _error_handlers(api)
    guarded = Guard(api, token=token, read_token=read_token, max_body_bytes=max_body_bytes,
                    headers=[(b"x-content-type-options", b"nosniff"),
                             (b"referrer-policy", b"no-referrer"),
                             (b"cache-control", b"no-store"),
                             (b"content-security-policy", webview.CONTENT_POLICY.encode())])
    guarded.api = api  # for tests and embedding
    return guarded


def _state(request: Request) -> HistoryState:
    return request.app.state.history


def _json(obj: Any, status: int = 200) -> JSONResponse:
    return JSONResponse(wire.jsonable(obj), status_code=status)


def _fingerprint(d: dict[str, Any]) -> Fingerprint:
    return Fingerprint.from_dict(d)


def _api_routes(api: FastAPI) -> None:
    api.get("/health", summary="Status of the server")(health)
    api.get("/api/info", summary="Counts per family and metric")(info)
    api.get("/api/datasets", summary="The datasets")(list_datasets)
    api.get("/api/datasets/{dataset_id}", summary="One dataset")(one_dataset)
    api.get("/api/studies", summary="The studies with their best scores")(list_studies)
    api.get("/api/tables", summary="The three tables")(tables)
    api.get("/api/fingerprints", summary="Stored fingerprints")(fingerprints)
    api.post("/api/similar", summary="Nearest past datasets")(similar)
    api.post("/api/suggest", summary="Warm-start configurations")(suggest)
    api.post("/api/log", summary="Log a finished study (write token)")(log_study)
    api.get("/api/records", summary="The datasets with their studies (kb list)")(records)
    api.get("/api/records/{ref}", summary="One study or dataset (kb show)")(one_record)
    api.delete("/api/records/{ref}", summary="Delete a study (write token)")(delete_record)
    api.get("/api/backtest/{family}", summary="Backtest of the ranking strategies")(
        backtest_summary)
    api.get("/api/check", summary="Integrity check")(check)
    api.post("/api/check/repair", summary="Check and repair (write token)")(repair)
    api.get("/api/write-access", summary="Whether this token may write (write token)")(
        write_access)
    api.get("/api/map.svg", summary="The similarity map",
            response_class=Response)(map_picture)
    api.post("/api/map", summary="The map with a dataset placed on it",
             response_class=Response)(map_with_query)


# -- API handlers (plain functions: FastAPI runs them in its thread pool) ---------------------
def health(request: Request) -> JSONResponse:
    kb = _state(request).kb
    return _json({"status": "ok", "version": __version__, "format_version": kb.format_version,
                  "writes": request.app.state.writes,
                  "reads_need_token": request.app.state.read_protected})


def info(request: Request) -> JSONResponse:
    return _json(_state(request).kb.info())


def list_datasets(request: Request) -> JSONResponse:
    return _json(dataset_rows(_state(request)))


def dataset_rows(state: HistoryState) -> list[dict[str, Any]]:
    """One row per dataset: id, name, task, target, size, studies and families."""
    t, fps, studies = state.tables(), state.fingerprints(), state.study_rows()
    out = []
    for d in t["datasets"].itertuples(index=False):
        own = studies[studies["dataset_id"] == d.dataset_id]
        fp = fps[d.dataset_id]
        out.append({"dataset_id": d.dataset_id, "name": d.name, "task": d.task,
                    "target": d.target, "catalogue_version": int(d.catalogue_version),
                    "rows": fp.values.get("rows"), "columns": fp.values.get("columns"),
                    "studies": int(len(own)), "families": sorted(set(own["family"]))})
    return sorted(out, key=lambda r: (r["task"], r["name"]))


def dataset_detail(state: HistoryState, dataset_id: str, k: int = 5) -> dict[str, Any]:
    """A dataset's row, fingerprint, studies and ``k`` nearest other datasets."""
    datasets = state.tables()["datasets"]
    found = datasets[datasets["dataset_id"] == dataset_id]
    if found.empty:
        raise HTTPException(404, f"no dataset {dataset_id!r} in the history")
    fp = state.fingerprints()[dataset_id]
    near = [n for n in state.similar(fp, k + 1)
            if n.dataset_id != dataset_id][:k]
    studies = state.study_rows()
    own = studies[studies["dataset_id"] == dataset_id].sort_values("created_at")
    return {"dataset": {c: found.iloc[0][c] for c in
                        ("dataset_id", "name", "task", "target", "catalogue_version")},
            "fingerprint": fp, "studies": _study_dicts(own), "neighbours": near}


def _study_dicts(frame) -> list[dict[str, Any]]:
    cols = ["study_id", "dataset_id", "family", "task", "metric", "better", "label",
            "trials", "ok", "best_score", "source", "created_at"]
    return [{c: r[c] for c in cols} for r in frame.to_dict(orient="records")]


def one_dataset(dataset_id: str, request: Request) -> JSONResponse:
    d = dataset_detail(_state(request), dataset_id)
    return _json({**d, "fingerprint": d["fingerprint"].to_dict(),
                  "neighbours": [n.to_dict() for n in d["neighbours"]]})


def list_studies(request: Request, family: str | None = Query(None, max_length=64),
                 task: Task | None = None) -> JSONResponse:
    s = _state(request).study_rows()
    if family is not None:
        s = s[s["family"] == family]
    if task is not None:
        s = s[s["task"] == task]
    return _json(_study_dicts(s))


def tables(request: Request, family: str | None = Query(None, max_length=64),
           task: Task | None = None) -> JSONResponse:
    t = _state(request).kb.tables(family=family, task=task)
    return _json({name: wire.frame_to_wire(df) for name, df in t.items()})


def fingerprints(request: Request) -> JSONResponse:
    return _json({i: fp.to_dict() for i, fp in _state(request).fingerprints().items()})


def similar(body: SimilarRequest, request: Request) -> JSONResponse:
    found = _state(request).similar(_fingerprint(body.fingerprint), body.k)
    return _json([n.to_dict() for n in found])


def suggest(body: SuggestRequest, request: Request) -> JSONResponse:
    found = _state(request).kb.suggest(
        fingerprint_of=_fingerprint(body.fingerprint), family=body.family, k=body.k,
        metric=body.metric, strategy=body.strategy, space=body.space,
        max_fit_seconds=body.max_fit_seconds, seed=body.seed)
    return _json([s.to_dict() for s in found])


def log_study(body: LogRequest, request: Request) -> JSONResponse:
    study = _state(request).kb.log(
        fingerprint_of=_fingerprint(body.fingerprint), family=body.family, trials=body.trials,
        metric=body.metric, better=body.better, name=body.name, task=body.task,
        source=body.source, file_name=body.file_name)
    log.info("logged study %s (%s) for dataset %s", study.study_id, study.family,
             study.dataset_id)
    return _json(study.to_dict(), status=201)


def records(request: Request) -> JSONResponse:
    return _json(_state(request).kb.list_studies())


def one_record(request: Request, ref: str) -> JSONResponse:
    return _json(_state(request).kb.show(ref))


def delete_record(request: Request, ref: str) -> JSONResponse:
    # reached only with the write token (every DELETE needs it); the tombstone changes
    # the state's cache key, so cached answers are recomputed without the study
    out = _state(request).kb.delete(ref)
    log.info("deleted study %s", out.get("study_id", ref))
    return _json(out)


def write_access(request: Request) -> JSONResponse:
    # reached only with the write token (the guard refuses anything else)
    return _json({"writes": True, "path": str(_state(request).kb.path)})


def _int_list(text: str, what: str) -> tuple[int, ...]:
    try:
        values = tuple(int(x) for x in text.split(",") if x.strip())
    except ValueError:
        raise BadInputError(f"{what} must be comma-separated integers, not {text!r}") from None
    if not values or min(values) < 1 or len(values) > 50:
        raise BadInputError(f"{what} must be 1 to 50 positive integers")
    return values


def backtest_summary(family: str, request: Request,
                     ks: str = Query(",".join(map(str, DEFAULT_KS)), max_length=200),
                     strategies: str | None = Query(None, max_length=500),
                     metric: str | None = Query(None, max_length=64),
                     seed: int = Query(0, ge=0, le=2**32 - 1),
                     random_repeats: int = Query(10, ge=1, le=100)) -> JSONResponse:
    names = None if strategies is None else [s.strip() for s in strategies.split(",")
                                             if s.strip()]
    result = _state(request).backtest(family, ks=_int_list(ks, "ks"), strategies=names,
                                      metric=metric, seed=seed, random_repeats=random_repeats)
    return _json(result.to_dict())


def check(request: Request,
          grace_seconds: float | None = Query(None, ge=0, allow_inf_nan=False)
          ) -> JSONResponse:
    return _json(_state(request).kb.check(repair=False, grace_seconds=grace_seconds).to_dict())


def repair(request: Request,
           grace_seconds: float | None = Query(None, ge=0, allow_inf_nan=False)
           ) -> JSONResponse:
    return _json(_state(request).kb.check(repair=True, grace_seconds=grace_seconds).to_dict())


def _svg(text: str) -> Response:
    return Response(text, media_type="image/svg+xml")


def map_picture(request: Request) -> Response:
    state = _state(request)
    return _svg(state.cached("map_svg", lambda: map_svg(state.maps(), state.names(),
                                                        link="/datasets/{id}")))


def map_with_query(body: MapRequest, request: Request) -> Response:
    state = _state(request)
    return _svg(map_svg(state.maps(), state.names(), query=_fingerprint(body.fingerprint),
                        query_label=body.label, link="/datasets/{id}"))


# -- web view -------------------------------------------------------------------------------------
def _view_routes(api: FastAPI) -> None:
    api.get("/", response_class=HTMLResponse, include_in_schema=False)(view_index)
    api.get("/datasets/{dataset_id}", response_class=HTMLResponse,
            include_in_schema=False)(view_dataset)
    api.get("/families/{family}", response_class=HTMLResponse,
            include_in_schema=False)(view_family)


def view_index(request: Request) -> HTMLResponse:
    state = _state(request)
    svg = map_picture(request).body.decode()
    return HTMLResponse(webview.index_page(state.kb.info(), dataset_rows(state), svg))


def view_dataset(dataset_id: str, request: Request) -> HTMLResponse:
    state = _state(request)
    d = dataset_detail(state, dataset_id)
    svg = state.cached(("map_svg", dataset_id), lambda: map_svg(
        state.maps(), state.names(), highlight=dataset_id, link="/datasets/{id}"))
    return HTMLResponse(webview.dataset_page(d["dataset"], d["fingerprint"], d["studies"],
                                             d["neighbours"], svg))


def view_family(family: str, request: Request) -> HTMLResponse:
    state = _state(request)
    fam = get_family(family)
    described = next(f for f in families() if f["name"] == fam.name)
    result, message = state.backtest_later(fam.name)
    summary = svg = None
    if result is not None:
        summary = result.summary()
        svg = state.cached(("regret_svg", fam.name), lambda: regret_svg(result))
    studies = state.study_rows()
    studies = studies[studies["family"] == fam.name].assign(
        dataset=lambda s: s["dataset_id"].map(state.names()))
    return HTMLResponse(webview.family_page(described, summary, svg, message,
                                            studies.to_dict(orient="records")))


def regret_svg(result) -> str:
    """The backtest's regret curves as SVG text (drawn by :func:`plot_regret`)."""
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "regret.svg"
        plot_regret(result, out)
        text = out.read_text(encoding="utf-8")
    return text[text.index("<svg"):]


# -- errors ---------------------------------------------------------------------------------------
def _error_handlers(api: FastAPI) -> None:
    @api.exception_handler(RequestValidationError)
    async def invalid(request: Request, exc: RequestValidationError) -> JSONResponse:
        problems = [{"field": ".".join(str(p) for p in e["loc"][1:]) or e["loc"][0],
                     "message": e["msg"]} for e in exc.errors()]
        text = "; ".join(f"{p['field']}: {p['message']}" for p in problems[:5])
        return JSONResponse({"error": f"invalid request: {text}",
                             "kind": wire.INVALID_REQUEST, "problems": problems[:50]}, 422)

    @api.exception_handler(HTTPException)
    async def http_error(request: Request, exc: HTTPException) -> JSONResponse:
        return JSONResponse({"error": str(exc.detail), "kind": wire.NOT_FOUND if
                             exc.status_code == 404 else wire.INVALID_REQUEST},
                            exc.status_code, headers=getattr(exc, "headers", None))

    @api.exception_handler(WarmstartError)
    async def library_error(request: Request, exc: WarmstartError) -> JSONResponse:
        if isinstance(exc, NothingToSuggestError):
            return JSONResponse({"error": str(exc), "kind": wire.NOTHING_TO_SUGGEST}, 404)
        return JSONResponse({"error": str(exc), "kind": wire.BAD_INPUT}, 400)

    @api.exception_handler(Exception)
    async def internal(request: Request, exc: Exception) -> JSONResponse:
        log.error("internal error on %s %s", request.method, request.url.path, exc_info=exc)
        return JSONResponse({"error": "internal error; the server's log has the details",
                             "kind": wire.INTERNAL}, 500)


# -- running it -----------------------------------------------------------------------------------
def serve(path: str | os.PathLike, *, host: str = "127.0.0.1", port: int = 8765,
          token: str | None = None, read_token: str | None = None,
          max_body_bytes: int = DEFAULT_MAX_BODY_BYTES, log_level: str = "warning",
          on_ready=None) -> None:
    """Serve the history at ``path`` until interrupted (uvicorn, one process).

    Parameters
    ----------
    path : path-like
        An existing history directory.
    host, port : str, int
        Where to listen; loopback by default. Port 0 picks a free one.
    token, read_token : str, optional
        See :func:`create_app`.
    max_body_bytes : int
    log_level : str
        uvicorn's log level.
    on_ready : callable, optional
        Called with the URL once the address is bound, just before serving starts.

    Raises :class:`BadInputError` when the history cannot be opened or the address
    cannot be listened on.
    """
    import socket
    import warnings

    import uvicorn

    # Requests run in threads, where numpy's all-NaN notices and scikit-learn's note
    # about thread-local configuration would fill the log without telling anyone anything
    warnings.filterwarnings("ignore", category=RuntimeWarning, module=r"numpy\.")
    warnings.filterwarnings("ignore", message=r".*sklearn\.utils\.parallel\.delayed",
                            category=UserWarning)
    app = create_app(path, token=token, read_token=read_token, max_body_bytes=max_body_bytes)
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    sock = socket.socket(family, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    try:
        sock.bind((host.strip("[]"), port))
    except OSError as exc:
        sock.close()
        raise BadInputError(f"cannot listen on {host}:{port}: {exc.strerror}") from None
    except (OverflowError, TypeError):
        sock.close()
        raise BadInputError(f"cannot listen on {host}:{port}: bad port") from None
    bound = sock.getsockname()[1]
    config = uvicorn.Config(app, log_level=log_level, server_header=False,
                            timeout_keep_alive=5, access_log=log_level in ("info", "debug"))
    server = uvicorn.Server(config)
    if on_ready is not None:
        on_ready(f"http://{host if ':' not in host else '[' + host + ']'}:{bound}")
    try:
        server.run(sockets=[sock])
    finally:
        sock.close()
        app.api.state.history.close()
