"""Server-rendered pages. Each handler gathers data from the workspace and renders one template."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, RedirectResponse
from starlette.concurrency import run_in_threadpool
from starlette.datastructures import UploadFile

from .. import config
from ..errors import SettingsError
from ..ingest import IngestError
from ..methods import methods_content
from ..store import UploadTooLarge
from .. import figures as plots
from ..given import conditioning_changes
from ..core.verdict import marginals_normal_not_joint
from ..formatting import embed_json
from ..payloads import pair_columns
from pydantic import ValidationError

from .deps import WorkspaceDep
from .workspace import Workspace
from .models import ORDERED_FILE, AnalysisRequest, validation_message

router = APIRouter(include_in_schema=False)


def _render(request: Request, template: str, context: dict, status: int = 200) -> HTMLResponse:
    return request.app.state.templates.TemplateResponse(request, template, context, status_code=status)


def _home(request: Request, ws: Workspace, error: str = "", status: int = 200) -> HTMLResponse:
    return _render(request, "home.html", {
        "datasets": ws.datasets(), "error": error, "demo_available": config.DEMO_FILE.exists(),
        "demo_id": request.app.state.demo_id, "max_upload_mb": ws.max_upload_bytes // (1024 * 1024),
    }, status)


@router.get("/methods", response_class=HTMLResponse)
def methods_page(request: Request):
    return _render(request, "methods.html", {"methods": methods_content()})


@router.get("/", response_class=HTMLResponse)
def home(request: Request, ws: WorkspaceDep):
    return _home(request, ws)


@router.post("/upload")
async def upload(request: Request, ws: WorkspaceDep):
    form = await request.form()
    file = form.get("file")
    try:
        if not isinstance(file, UploadFile) or not file.filename:
            return _home(request, ws, "Choose a file to upload first.", 400)
        try:
            row = await run_in_threadpool(ws.upload, file.file, file.filename)
        except IngestError as exc:
            return _home(request, ws, " ".join(str(exc).split()), 400)
        except UploadTooLarge:
            return _home(request, ws, f"{file.filename}: the file is larger than the upload limit of "
                                      f"{ws.max_upload_bytes // (1024 * 1024)} MB.", 413)
    finally:
        await form.close()
    return RedirectResponse(f"/datasets/{row.id}", status_code=303)


@router.post("/demo")
def open_demo(request: Request, ws: WorkspaceDep):
    if not config.DEMO_FILE.exists():
        return _home(request, ws, "The demo dataset is not installed (sample_data/vineyard_blocks.csv).", 404)
    row = ws.ensure_demo()
    return RedirectResponse(f"/datasets/{row.id}", status_code=303)


def _dataset_page(request: Request, ws: Workspace, dataset_id: str, error: str = "", status: int = 200,
                  form: dict | None = None) -> HTMLResponse:
    dataset = ws.dataset(dataset_id)
    form = form or {}
    chosen_measures = form.get("measures") or list(config.DEFAULT_MEASURES)
    return _render(request, "dataset.html", {
        "dataset": dataset, "summary": dataset.summary, "error": error,
        "analyses": ws.store.list_analyses(dataset.id),
        "chosen_measures": chosen_measures,
        "chosen_columns": form.get("columns"),
        "form": form, "ordered_file": ORDERED_FILE,
    }, status)


@router.get("/datasets/{dataset_id}", response_class=HTMLResponse)
def dataset_page(dataset_id: str, request: Request, ws: WorkspaceDep):
    return _dataset_page(request, ws, dataset_id)


@router.post("/datasets/{dataset_id}/analyses")
async def start_analysis_form(dataset_id: str, request: Request, ws: WorkspaceDep):
    form = await request.form()
    dataset = ws.dataset(dataset_id)
    columns = [str(c) for c in form.getlist("columns")]
    kinds = {key[len("kind-"):]: str(value) for key, value in form.multi_items()
             if key.startswith("kind-") and str(value) in ("numeric", "categorical")}
    # what the form shows again when the options are refused
    echo = {"measures": [str(m) for m in form.getlist("measures")], "columns": columns,
            "groups": str(form.get("groups", "")),
            "missing": str(form.get("missing") or config.DEFAULT_MISSING),
            "adjust": str(form.get("adjust") or config.DEFAULT_ADJUST),
            "confidence": str(form.get("confidence") or config.DEFAULT_CONFIDENCE),
            "permutations": str(form.get("permutations") or 0), "seed": str(form.get("seed") or config.DEFAULT_SEED),
            "tests": str(form.get("tests") or ""), "ordered": str(form.get("ordered") or ""),
            "difference": form.get("difference") == "yes", "kinds": kinds,
            "given": [str(c) for c in form.getlist("given")]}
    if not echo["measures"]:
        return _dataset_page(request, ws, dataset_id, "Choose at least one measure.", 422, echo)
    try:
        options = AnalysisRequest.from_form(form, dataset.summary["numeric"])
    except ValidationError as exc:
        return _dataset_page(request, ws, dataset_id, validation_message(exc, echo), 422, echo)
    if options.columns is not None and len(options.columns) == 0 and not options.groups:
        return _dataset_page(request, ws, dataset_id, "Choose at least two columns.", 422, echo)
    try:
        row = ws.start_analysis(dataset_id, options)
    except SettingsError as exc:
        return _dataset_page(request, ws, dataset_id, " ".join(str(exc).split()), 422, echo)
    return RedirectResponse(f"/analyses/{row.id}", status_code=303)


@router.get("/analyses/{analysis_id}", response_class=HTMLResponse)
def analysis_page(analysis_id: str, request: Request, ws: WorkspaceDep, order: str = "input", diff: str = ""):
    row = ws.analysis(analysis_id)
    dataset = ws.dataset(row.dataset_id)
    context = {"analysis": row, "dataset": dataset, "status_json": embed_json(ws.analysis_json(row))}
    if row.status != "done":
        return _render(request, "running.html", context)
    table = ws.pair_table(row)
    cluster_on = order if order in table.measures else None
    difference = None
    if diff:
        a, _, b = diff.partition(",")
        if a in table.measures and b in table.measures and a != b:
            difference = (a, b)
    if difference is None:
        difference = ws.default_difference(table.measures)
    figures = ws.heatmaps(row, cluster_on, difference)
    # Only the table's columns here: its rows come page by page from /api/.../pair-table, so a
    # verdict learnt since (which rebuilds the rows) never delays the maps.
    columns = pair_columns(table.measures)
    k = len(table.variables)
    verdicts = ws.verdicts(row)
    significant, tested = ws.significance_counts(row)
    context.update({
        "table": table, "measures": table.measures, "order": cluster_on or "input",
        "difference": difference, "figures": figures, "order_names": figures["order"],
        "pair_columns": columns, "pair_columns_json": embed_json(columns),
        "top_pairs": figures["top"], "verdicts": verdicts, "n_pairs": k * (k - 1) // 2,
        "n_variables": len(table.variables), "significant": significant, "tested": tested,
        "serial_note": ws.serial_note(row),
        "given_changes": conditioning_changes(table, config.SIGNIFICANCE_LEVEL),
    })
    return _render(request, "analysis.html", context)


@router.post("/analyses/{analysis_id}/cancel")
def cancel_form(analysis_id: str, ws: WorkspaceDep):
    row = ws.analysis(analysis_id)
    if row.status in ("queued", "running"):
        ws.cancel(analysis_id)
    return RedirectResponse(f"/analyses/{analysis_id}", status_code=303)


async def _confirmed(request: Request) -> None:
    form = await request.form()
    confirmed = form.get("confirm") == "yes"
    await form.close()
    if not confirmed:
        from starlette.exceptions import HTTPException

        raise HTTPException(status_code=400, detail="tick the box to confirm the deletion, then press Delete")


@router.post("/analyses/{analysis_id}/rerun")
def rerun_form(analysis_id: str, ws: WorkspaceDep):
    row = ws.rerun(analysis_id)
    return RedirectResponse(f"/analyses/{row.id}", status_code=303)


@router.post("/analyses/{analysis_id}/delete")
async def delete_analysis_form(analysis_id: str, request: Request, ws: WorkspaceDep):
    await _confirmed(request)
    row = ws.analysis(analysis_id)
    await run_in_threadpool(ws.delete_analysis, analysis_id)
    return RedirectResponse(f"/datasets/{row.dataset_id}", status_code=303)


@router.post("/datasets/{dataset_id}/delete")
async def delete_dataset_form(dataset_id: str, request: Request, ws: WorkspaceDep):
    await _confirmed(request)
    await run_in_threadpool(ws.delete_dataset, dataset_id)
    return RedirectResponse("/", status_code=303)


@router.get("/analyses/{analysis_id}/pair", response_class=HTMLResponse)
def pair_page(analysis_id: str, request: Request, x: str, y: str, ws: WorkspaceDep):
    row = ws.analysis(analysis_id)
    dataset = ws.dataset(row.dataset_id)
    table = ws.pair_table(row)
    detail, complete = ws.pair_view(row, x, y)
    if detail.get("categorical"):  # a categorical side: groups or a contingency table (issue 18)
        from .. import figures_categorical as fc

        figure = fc.group_figure(detail) if detail["categorical"]["view"] == "groups" else None
        return _render(request, "pair_categorical.html", {
            "analysis": row, "dataset": dataset, "table": table, "detail": detail,
            "figure": embed_json(figure), "residual_colour": fc.residual_colour,
            "saturation": fc.RESIDUAL_SATURATION})
    scatter = plots.pair_figure(detail)
    ranks = plots.rank_figure(detail)
    series = plots.series_figure(detail)
    residuals = plots.residual_figure(detail)
    g = detail["gaussian"]
    slice_data = {
        "x": detail["points"]["x"], "y": detail["points"]["y"],
        "mean": g["mean"], "cov": g["cov"], "conditional": g["conditional"],
        "xLabel": detail["x"], "yLabel": detail["y"],
    }
    marg = g.get("marginal_normality") or {}
    misleads = marginals_normal_not_joint([(marg.get(k) or {}).get("p_value") for k in ("x", "y")] if marg else [],
                                          (g.get("normality") or {}).get("p_value"), config.SIGNIFICANCE_LEVEL)
    return _render(request, "pair.html", {
        "analysis": row, "dataset": dataset, "table": table, "detail": detail, "complete": complete,
        "figures": embed_json({"scatter": scatter, "ranks": ranks, **(series or {}),
                               **({"residuals": residuals} if residuals else {})}), "slice": embed_json(slice_data),
        "dense": scatter["layout"]["meta"]["dense"],
        "normal_marginals_not_joint": misleads,
        "weak_rho": g.get("rho") is not None and abs(g["rho"]) < 0.2,
    })
