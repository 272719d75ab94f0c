"""Dependencies shared by the routes, as ``Annotated`` aliases.

Routers made by a ``router(settings)`` factory read the settings they were made with; a
dependency is resolved on every request, which for a small comparison costs a few percent of
its time. ``SettingsDep`` serves the routes defined at module level.
"""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request

from ..config import Settings


async def get_settings(request: Request) -> Settings:
    return request.app.state.settings  # type: ignore[no-any-return]


SettingsDep = Annotated[Settings, Depends(get_settings)]
