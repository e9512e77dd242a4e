"""The JSON API (docs/contracts.md). Translates HTTP to :class:`~pairlens.web.workspace.Workspace` calls."""

from __future__ import annotations

import json
from typing import Annotated

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse, JSONResponse, Response

from starlette.concurrency import run_in_threadpool
from starlette.datastructures import UploadFile
from ..formatting import finite_or_null
from .deps import WorkspaceDep
from .models import AnalysisRequest

router = APIRouter(prefix="/api")


def _json(content, status: int = 200) -> JSONResponse:
    # Straight to json.dumps: FastAPI's jsonable_encoder walks every number of a
    # pair's points in Python (about 6 ms of a 7 ms pair request at 1000 rows).
    try:
        return JSONResponse(content, status_code=status)
    except ValueError:  # a non-finite number (an overflowing fit): sent as null
        return JSONResponse(finite_or_null(content), status_code=status)


@router.post("/datasets", status_code=201)
async def upload_dataset(request: Request, ws: WorkspaceDep):
    form = await request.form()
    file = form.get("file")
    if not isinstance(file, UploadFile):
        await form.close()
        return _json({"detail": "send the table as a multipart form field named 'file'"}, 422)
    try:
        row = await run_in_threadpool(ws.upload, file.file, file.filename or "upload")
    finally:
        await form.close()
    return _json(ws.dataset_json(row), 201)


@router.get("/datasets")
def list_datasets(ws: WorkspaceDep):
    return _json([d.public() for d in ws.datasets()])


@router.get("/datasets/{dataset_id}")
def get_dataset(dataset_id: str, ws: WorkspaceDep):
    return _json(ws.dataset_json(ws.dataset(dataset_id)))


_finite = finite_or_null


@router.post("/datasets/{dataset_id}/analyses", status_code=202)
def start_analysis(dataset_id: str, ws: WorkspaceDep, options: AnalysisRequest | None = None):
    row = ws.start_analysis(dataset_id, options or AnalysisRequest())
    return _json({"id": row.id, "status": row.status, "url": f"/analyses/{row.id}"}, 202)


@router.get("/analyses/{analysis_id}")
def get_analysis(analysis_id: str, ws: WorkspaceDep):
    return _json(ws.analysis_json(ws.analysis(analysis_id)))


@router.get("/analyses/{analysis_id}/pairs")
def get_pairs(analysis_id: str, ws: WorkspaceDep):
    return Response(ws.pair_records_json(ws.analysis(analysis_id)), media_type="application/json")


@router.get("/analyses/{analysis_id}/pair")
def get_pair(analysis_id: str, ws: WorkspaceDep, x: Annotated[str, Query()], y: Annotated[str, Query()]):
    detail = ws.pair(ws.analysis(analysis_id), x, y)
    # a fit over values near 1e300 overflows to inf: JSON has no such number, null says "undefined"
    return _json({k: (v if k == "points" else _finite(v)) for k, v in detail.items() if k != "seconds"})


@router.get("/analyses/{analysis_id}/pair-preview")
def get_pair_preview(analysis_id: str, ws: WorkspaceDep, x: Annotated[str, Query()], y: Annotated[str, Query()],
                     points: Annotated[str, Query(pattern="^(json|packed)$")] = "json"):
    """The quick part of a pair (points, the analysis's numbers, Gaussian moments) for the map's side panel.

    ``complete`` is False when the verdict and the normality test still have to
    come from ``/pair``. ``points=packed`` sends the points as base64 arrays
    (:func:`pairlens.pairs.pack_points`).
    """
    detail, complete = ws.pair_view(ws.analysis(analysis_id), x, y, packed=points == "packed")
    return _json({k: v for k, v in detail.items() if k != "seconds"} | {"complete": complete})


@router.get("/analyses/{analysis_id}/pair-table")
def get_pair_table(analysis_id: str, ws: WorkspaceDep, sort: str = "evidence", desc: bool = False,
                   text: str = "", column: int = -1, q: float | None = None, verdict: str = "",
                   offset: Annotated[int, Query(ge=0)] = 0, limit: Annotated[int, Query(ge=1, le=1000)] = 100,
                   download: str = ""):
    """One page of the wide pair table, sorted and filtered on the server.

    ``download=csv`` or ``download=json`` sends every filtered row in the asked
    order as a file instead of one page.
    """
    row = ws.analysis(analysis_id)
    grid = ws.pair_grid(row)
    try:
        index = grid.query(sort=sort, descending=desc, text=text, column=column, q_below=q, verdict=verdict)
    except ValueError as exc:
        return _json({"detail": str(exc)}, 422)
    if download == "csv":
        return Response(grid.csv(index), media_type="text/csv; charset=utf-8", headers={
            "Content-Disposition": f'attachment; filename="pairs-{row.id}.csv"'})
    if download == "json":
        return Response(
            json.dumps({"columns": grid.columns, "rows": grid.records(index)}, ensure_ascii=False,
                       allow_nan=False, separators=(",", ":")),
            media_type="application/json", headers={
                "Content-Disposition": f'attachment; filename="pairs-{row.id}.json"'})
    if download:
        return _json({"detail": "download is csv or json"}, 422)
    page = index[offset:offset + limit]
    return _json({"total": len(grid), "filtered": int(index.size), "offset": offset,
                  "columns": grid.columns, "verdicts": grid.verdicts(),
                  "rows": [grid.row(i) for i in page]})


@router.post("/analyses/{analysis_id}/cancel")
def cancel_analysis(analysis_id: str, ws: WorkspaceDep):
    row = ws.cancel(analysis_id)
    return _json(row.public(), 202)


@router.post("/analyses/{analysis_id}/rerun", status_code=202)
def rerun_analysis(analysis_id: str, ws: WorkspaceDep):
    row = ws.rerun(analysis_id)
    return _json({"id": row.id, "status": row.status, "url": f"/analyses/{row.id}"}, 202)


@router.delete("/analyses/{analysis_id}", status_code=204)
def delete_analysis(analysis_id: str, ws: WorkspaceDep):
    ws.delete_analysis(analysis_id)
    return Response(status_code=204)


@router.delete("/datasets/{dataset_id}", status_code=204)
def delete_dataset(dataset_id: str, ws: WorkspaceDep):
    ws.delete_dataset(dataset_id)
    return Response(status_code=204)


@router.get("/analyses/{analysis_id}/report.html")
def get_report(analysis_id: str, ws: WorkspaceDep):
    row = ws.analysis(analysis_id)
    html = ws.report_html(row)
    return HTMLResponse(html, headers={
        "Content-Disposition": f'attachment; filename="pairlens-report-{row.id}.html"'})
