"""Chart spec use cases: save the printed geometry of a chart (or a calibration as a template) and reuse it."""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, created_fields, field_changes, record_event
from tracedesk.digitizing.schemas import ChartSpecCreate, ChartSpecRead, ChartSpecUpdate, DetectRequest
from tracedesk.errors import NotFound, Unprocessable
from tracedesk.models import ChartSpec, Collection
from tracedesk.science.calibration import build_calibration
from tracedesk.science.grid_spec import grid_spec_from_dict

FIELDS = ("name", "geometry", "calibration_template", "notes")


def _validated(geometry: dict[str, Any] | None, template: dict[str, Any] | None) -> str:
    """Check both parts with the science core (422 naming the field); returns the chart kind."""
    kinds = set()
    if geometry is not None:
        kinds.add(str(grid_spec_from_dict(geometry).to_dict()["kind"]))
    if template is not None:
        kinds.add(build_calibration(template).kind)
    if len(kinds) > 1:
        raise Unprocessable(f"geometry and calibration_template describe different kinds of chart: {sorted(kinds)}")
    return kinds.pop()


def get_chart_spec(session: Session, spec_id: int) -> ChartSpec:
    spec = session.get(ChartSpec, spec_id)
    if spec is None:
        raise NotFound(f"no chart spec with id {spec_id}")
    return spec


def _values(spec: ChartSpec) -> dict[str, Any]:
    return {
        "name": spec.name,
        "geometry": json.loads(spec.geometry) if spec.geometry else None,
        "calibration_template": json.loads(spec.calibration_template) if spec.calibration_template else None,
        "notes": spec.notes,
    }


def create_chart_spec(session: Session, body: ChartSpecCreate, *, actor: Actor) -> ChartSpec:
    if body.collection_id is not None and session.get(Collection, body.collection_id) is None:
        raise NotFound(f"no collection with id {body.collection_id}")
    kind = _validated(body.geometry, body.calibration_template)
    spec = ChartSpec(
        collection_id=body.collection_id,
        name=body.name.strip(),
        kind=kind,
        notes=body.notes,
        geometry=json.dumps(body.geometry) if body.geometry is not None else None,
        calibration_template=json.dumps(body.calibration_template) if body.calibration_template else None,
        created_by_id=actor.id,
    )
    session.add(spec)
    session.flush()
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="chart_spec",
        entity_id=spec.id,
        entity_version=spec.version,
        changes=created_fields(_values(spec)),
    )
    return spec


def update_chart_spec(session: Session, spec: ChartSpec, body: ChartSpecUpdate, *, actor: Actor) -> ChartSpec:
    before = _values(spec)
    after = {**before, **body.model_dump(exclude_unset=True)}
    spec.kind = _validated(after["geometry"], after["calibration_template"])
    changes = field_changes(before, after)
    if not changes:
        return spec
    spec.name, spec.notes = after["name"], after["notes"]
    spec.geometry = json.dumps(after["geometry"]) if after["geometry"] is not None else None
    template = after["calibration_template"]
    spec.calibration_template = json.dumps(template) if template is not None else None
    spec.version += 1
    record_event(
        session,
        actor=actor,
        action="update",
        entity_type="chart_spec",
        entity_id=spec.id,
        entity_version=spec.version,
        changes=changes,
    )
    return spec


def list_chart_specs(session: Session, *, collection_id: int | None) -> list[ChartSpec]:
    query = select(ChartSpec).order_by(ChartSpec.name, ChartSpec.id)
    if collection_id is not None:  # a collection's own specs and the shared ones
        query = query.where(or_(ChartSpec.collection_id == collection_id, ChartSpec.collection_id.is_(None)))
    return list(session.scalars(query))


def chart_spec_read(spec: ChartSpec) -> ChartSpecRead:
    values = _values(spec)
    return ChartSpecRead(
        id=spec.id,
        kind=spec.kind,
        collection_id=spec.collection_id,
        version=spec.version,
        created_at=spec.created_at,
        **values,
    )


def spec_for_detection(session: Session, body: DetectRequest) -> dict[str, Any]:
    if body.spec is not None:
        return body.spec
    assert body.chart_spec_id is not None
    spec = get_chart_spec(session, body.chart_spec_id)
    if not spec.geometry:
        raise Unprocessable(f"chart spec {spec.id} has no printed geometry to detect; add its grid first")
    geometry: dict[str, Any] = json.loads(spec.geometry)
    return geometry
