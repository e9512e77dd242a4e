"""The JSON API (docs/contracts.md). Translates HTTP to :class:`~pairlens.web.deps.Workspace` calls."""

from __future__ import annotations

import json
import math
from typing import Any

from fastapi import APIRouter, Body, Depends, Query, Request
from fastapi.responses import HTMLResponse, JSONResponse, Response

from starlette.concurrency import run_in_threadpool
from starlette.datastructures import UploadFile
from ..errors import SettingsError
from ..formatting import finite_or_null
from .deps import Workspace, get_workspace

router = APIRouter(prefix="/api")


def _json(content, status: int = 200) -> JSONResponse:
    # Straight to json.dumps: FastAPI's jsonable_encoder walks every number of a
    # pair's points in Python (about 6 ms of a 7 ms pair request at 1000 rows).
    try:
        return JSONResponse(content, status_code=status)
    except ValueError:  # a non-finite number (an overflowing fit): sent as null
        return JSONResponse(finite_or_null(content), status_code=status)


@router.post("/datasets", status_code=201)
async def upload_dataset(request: Request, ws: Workspace = Depends(get_workspace)):
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
def list_datasets(ws: Workspace = Depends(get_workspace)):
    return _json([d.public() for d in ws.datasets()])


@router.get("/datasets/{dataset_id}")
def get_dataset(dataset_id: str, ws: Workspace = Depends(get_workspace)):
    return _json(ws.dataset_json(ws.dataset(dataset_id)))


_finite = finite_or_null


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _text_list(field: str, value, *, allow_text: bool = True) -> None:
    if value is None or (allow_text and isinstance(value, str)):
        return
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise SettingsError(f"{field}: must be a list of names (strings){' or one comma-separated string' if allow_text else ''}"
                            f", got {_shown(value)}")


def _shown(value) -> str:
    text = json.dumps(value, allow_nan=True, default=str)
    return text if len(text) <= 60 else text[:57] + "..."


def strict_options(options: dict) -> dict:
    """Check the JSON types of the analysis options; a wrong type is a 422 naming the field.

    Nothing is coerced: ``2.7`` or ``true`` is not a number of permutations, ``Infinity`` and
    ``1e400`` (which JSON parsers turn into infinity) are not numbers at all. Values of the
    right type are checked by :class:`pairlens.engine.AnalysisSettings`; unknown names by the workspace.
    """
    if not isinstance(options, dict):
        raise SettingsError("the options must be a JSON object")
    for field in ("measures", "columns", "categorical", "numeric"):
        _text_list(field, options.get(field))
    groups = options.get("groups")
    if groups is not None:
        if isinstance(groups, dict):
            for name, members in groups.items():
                _text_list(f"groups.{name}", members)
        elif isinstance(groups, list):
            if not all(isinstance(g, str) for g in groups):
                raise SettingsError(f"groups: must be an object {{name: [columns]}} or a list of 'NAME=COL,COL' "
                                    f"strings, got {_shown(groups)}")
        else:
            raise SettingsError(f"groups: must be an object {{name: [columns]}}, got {_shown(groups)}")
    for field in ("missing", "adjust"):
        value = options.get(field)
        if value is not None and not isinstance(value, str):
            raise SettingsError(f"{field}: must be a string, got {_shown(value)}")
    value = options.get("confidence")
    if value is not None and (not _is_number(value) or not math.isfinite(value)):
        raise SettingsError(f"confidence: must be a finite number such as 0.95, got {_shown(value)}")
    for field in ("permutations", "seed"):
        value = options.get(field)
        if value is not None and not (isinstance(value, int) and not isinstance(value, bool)):
            raise SettingsError(f"{field}: must be a whole number, got {_shown(value)}")
    value = options.get("ordered")
    if value is not None and not isinstance(value, (bool, str)):
        raise SettingsError(f"ordered: must be true (rows in file order) or a column name, got {_shown(value)}")
    value = options.get("given")
    if value is not None and not (isinstance(value, str) or (isinstance(value, list)
                                                             and all(isinstance(c, str) for c in value))):
        raise SettingsError(f"given: must be a list of column names, got {_shown(value)}")
    value = options.get("difference")
    if value is not None and not isinstance(value, bool):
        raise SettingsError(f"difference: must be true or false, got {_shown(value)}")
    return options


@router.post("/datasets/{dataset_id}/analyses", status_code=202)
def start_analysis(dataset_id: str, options: dict[str, Any] = Body(default_factory=dict),
                   ws: Workspace = Depends(get_workspace)):
    strict_options(options)
    row = ws.start_analysis(dataset_id, options)
    return _json({"id": row.id, "status": row.status, "url": f"/analyses/{row.id}"}, 202)


@router.get("/analyses/{analysis_id}")
def get_analysis(analysis_id: str, ws: Workspace = Depends(get_workspace)):
    return _json(ws.analysis_json(ws.analysis(analysis_id)))


@router.get("/analyses/{analysis_id}/pairs")
def get_pairs(analysis_id: str, ws: Workspace = Depends(get_workspace)):
    return Response(ws.pair_records_json(ws.analysis(analysis_id)), media_type="application/json")


@router.get("/analyses/{analysis_id}/pair")
def get_pair(analysis_id: str, x: str = Query(...), y: str = Query(...), ws: Workspace = Depends(get_workspace)):
    detail = ws.pair(ws.analysis(analysis_id), x, y)
    # a fit over values near 1e300 overflows to inf: JSON has no such number, null says "undefined"
    return _json({k: (v if k == "points" else _finite(v)) for k, v in detail.items() if k != "seconds"})


@router.get("/analyses/{analysis_id}/pair-preview")
def get_pair_preview(analysis_id: str, x: str = Query(...), y: str = Query(...),
                     points: str = Query("json", pattern="^(json|packed)$"),
                     ws: Workspace = Depends(get_workspace)):
    """The quick part of a pair (points, the analysis's numbers, Gaussian moments) for the map's side panel.

    ``complete`` is False when the verdict and the normality test still have to
    come from ``/pair``. ``points=packed`` sends the points as base64 arrays
    (:func:`pairlens.pairs.pack_points`).
    """
    detail, complete = ws.pair_view(ws.analysis(analysis_id), x, y, packed=points == "packed")
    return _json({k: v for k, v in detail.items() if k != "seconds"} | {"complete": complete})


@router.get("/analyses/{analysis_id}/pair-table")
def get_pair_table(analysis_id: str, sort: str = "evidence", desc: bool = False, text: str = "",
                   column: int = -1, q: float | None = None, verdict: str = "",
                   offset: int = Query(0, ge=0), limit: int = Query(100, ge=1, le=1000),
                   download: str = "", ws: Workspace = Depends(get_workspace)):
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
    return _json({"total": len(grid.rows), "filtered": int(index.size), "offset": offset,
                  "columns": grid.columns, "verdicts": grid.verdicts(),
                  "rows": [grid.rows[int(i)] for i in page]})


@router.post("/analyses/{analysis_id}/cancel")
def cancel_analysis(analysis_id: str, ws: Workspace = Depends(get_workspace)):
    row = ws.cancel(analysis_id)
    return _json(row.public(), 202)


@router.post("/analyses/{analysis_id}/rerun", status_code=202)
def rerun_analysis(analysis_id: str, ws: Workspace = Depends(get_workspace)):
    row = ws.rerun(analysis_id)
    return _json({"id": row.id, "status": row.status, "url": f"/analyses/{row.id}"}, 202)


@router.delete("/analyses/{analysis_id}", status_code=204)
def delete_analysis(analysis_id: str, ws: Workspace = Depends(get_workspace)):
    ws.delete_analysis(analysis_id)
    return Response(status_code=204)


@router.delete("/datasets/{dataset_id}", status_code=204)
def delete_dataset(dataset_id: str, ws: Workspace = Depends(get_workspace)):
    ws.delete_dataset(dataset_id)
    return Response(status_code=204)


@router.get("/analyses/{analysis_id}/report.html")
def get_report(analysis_id: str, ws: Workspace = Depends(get_workspace)):
    row = ws.analysis(analysis_id)
    html = ws.report_html(row)
    return HTMLResponse(html, headers={
        "Content-Disposition": f'attachment; filename="pairlens-report-{row.id}.html"'})
