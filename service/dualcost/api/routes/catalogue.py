"""GET /v1/preference-families and GET /v1/index-formulas: what the engine offers, with sources."""

from __future__ import annotations

from fastapi import APIRouter, Request

from ...core.indices import REGISTRY
from ...core.preferences import FAMILIES
from ..render import negotiate
from ..routing import JsonRoute
from ..schemas.catalogue import FamilyOut, FormulaInfoOut, ParameterOut

router = APIRouter(route_class=JsonRoute, prefix="/v1", tags=["catalogue"])


@router.get("/preference-families", operation_id="listPreferenceFamilies",
            response_model=list[FamilyOut])
def list_families(request: Request) -> list[FamilyOut]:
    """The preference families, their behavioural parameters with defaults, and sources."""
    negotiate(request, ("json",))
    return [
        FamilyOut(family=name, title=cls.title, source=cls.source, homothetic=cls.homothetic,
                  parameters=[ParameterOut(name=s.name, meaning=s.meaning, required=s.required, shape=s.shape,
                                           default=s.default) for s in cls.parameter_specs])
        for name, cls in FAMILIES.items()
    ]


@router.get("/index-formulas", operation_id="listIndexFormulas",
            response_model=list[FormulaInfoOut])
def list_formulas(request: Request) -> list[FormulaInfoOut]:
    """The formula indices, which Konüs index each is compared with, which operations compute
    each one, and sources (one registry serves every operation)."""
    negotiate(request, ("json",))
    return [
        FormulaInfoOut(formula=f.name, title=f.title, source=f.source, compared_with=f.target,
                       needs=list(f.needs), superlative=f.superlative, symmetric=f.symmetric,
                       weighted=f.weighted,
                       operations=[s for s in ("comparison", "series", "households")
                                   if s in f.scopes])
        for f in REGISTRY.values()
    ]
