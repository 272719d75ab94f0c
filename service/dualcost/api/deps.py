"""How handlers reach the service's settings: from the application's state.

Handlers are module-level functions; the settings the app was created with live in
``app.state.settings``. Reading them from the request costs nothing per request, where a
dependency would be resolved again on every one (a few percent of a small comparison).
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request

from ..config import Settings


def settings_of(request: Request) -> Settings:
    return request.app.state.settings


async def get_settings(request: Request) -> Settings:
    return settings_of(request)


#: For handlers that take no request otherwise (the catalogue, the demo).
SettingsDep = Annotated[Settings, Depends(get_settings)]
