"""Dependencies shared by the routers: settings, workspace and write access."""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from service.api.tokens import token_problem
from service.settings import Settings
from service.workspace import Workspace

_bearer = HTTPBearer(auto_error=False, description="SOUNDING_TOKEN of the server")


def get_workspace(request: Request) -> Workspace:
    ws: Workspace = request.app.state.workspace  # set by create_app
    return ws


def get_settings(request: Request) -> Settings:
    return get_workspace(request).settings


def require_token(
    settings: Annotated[Settings, Depends(get_settings)],
    creds: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
) -> None:
    """Every change over HTTP needs ``Authorization: Bearer <SOUNDING_TOKEN>``."""
    problem = token_problem(settings, creds.scheme if creds else None, creds.credentials if creds else None)
    if problem is not None:
        raise problem


WorkspaceDep = Annotated[Workspace, Depends(get_workspace)]
SettingsDep = Annotated[Settings, Depends(get_settings)]
WriteAccess = Annotated[None, Depends(require_token)]
#: The bearer credentials, if any, for an endpoint that decides itself when they are needed.
Credentials = Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)]


def from_loopback(request: Request) -> bool:
    """Whether the peer is this machine (127.0.0.0/8 or ::1)."""
    import ipaddress

    host = request.client.host if request.client else ""
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False
