"""Dependencies shared by the routes, as ``Annotated`` aliases."""

from __future__ import annotations

from typing import Annotated

from fastapi import Depends, Request

from ..config import Settings


async def get_settings(request: Request) -> Settings:
    return request.app.state.settings  # type: ignore[no-any-return]


SettingsDep = Annotated[Settings, Depends(get_settings)]
