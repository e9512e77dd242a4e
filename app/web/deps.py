"""The routers' dependencies, in FastAPI's ``Annotated`` idiom."""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request

from .workspace import Workspace

__all__ = ["WorkspaceDep", "get_workspace"]


def get_workspace(request: Request) -> Workspace:
    """The app's one workspace (made by :func:`pairlens.web.app.create_app`)."""
    return request.app.state.workspace


# A route's parameter ``ws: WorkspaceDep`` receives the workspace.
WorkspaceDep = Annotated[Workspace, Depends(get_workspace)]
