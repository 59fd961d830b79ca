"""Reading the database back: unit states, whole records, one newform, a summary."""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import Engine, func, select

from builder.forms.record import SpaceRecord
from builder.storage.models import STATUS_DONE, Eigenvalue, Newform, Run, Space
from builder.storage.rows import rows_to_record

_SPACES = Space.__table__
_NEWFORMS = Newform.__table__
_EIGEN = Eigenvalue.__table__
_RUNS = Run.__table__


@dataclass(frozen=True)
class UnitState:
    status: str
    params: dict
    seconds: float
    content_hash: str | None


def unit_states(engine: Engine) -> dict[tuple[int, int, int], UnitState]:
    """(N, k, χ) ↦ state of every unit present in the database."""
    q = select(
        _SPACES.c.level,
        _SPACES.c.weight,
        _SPACES.c.char_index,
        _SPACES.c.status,
        _SPACES.c.params,
        _SPACES.c.seconds,
        _SPACES.c.content_hash,
    )
    with engine.connect() as conn:
        return {
            (r.level, r.weight, r.char_index): UnitState(
                r.status, dict(r.params), float(r.seconds or 0.0), r.content_hash
            )
            for r in conn.execute(q)
        }


def load_space(engine: Engine, N: int, k: int, c: int = 0) -> SpaceRecord | None:
    """The stored record of a done unit, identical to what the worker returned."""
    with engine.connect() as conn:
        space = (
            conn.execute(
                select(_SPACES).where(
                    _SPACES.c.level == N,
                    _SPACES.c.weight == k,
                    _SPACES.c.char_index == c,
                    _SPACES.c.status == STATUS_DONE,
                )
            )
            .mappings()
            .first()
        )
        if space is None:
            return None
        forms = (
            conn.execute(
                select(_NEWFORMS).where(
                    _NEWFORMS.c.level == N, _NEWFORMS.c.weight == k, _NEWFORMS.c.char_index == c
                )
            )
            .mappings()
            .all()
        )
        labels = [f["label"] for f in forms]
        eigen = (
            conn.execute(select(_EIGEN).where(_EIGEN.c.label.in_(labels))).mappings().all()
            if labels
            else []
        )
    return rows_to_record(dict(space), [dict(f) for f in forms], [dict(e) for e in eigen])


def load_newform(engine: Engine, label: str) -> tuple[dict, dict, list[dict]] | None:
    """(newform row, its space row, its eigenvalue rows sorted by p) or None."""
    with engine.connect() as conn:
        nf = conn.execute(select(_NEWFORMS).where(_NEWFORMS.c.label == label)).mappings().first()
        if nf is None:
            return None
        space = (
            conn.execute(
                select(_SPACES).where(
                    _SPACES.c.level == nf["level"],
                    _SPACES.c.weight == nf["weight"],
                    _SPACES.c.char_index == nf["char_index"],
                )
            )
            .mappings()
            .first()
        )
        eigen = (
            conn.execute(select(_EIGEN).where(_EIGEN.c.label == label).order_by(_EIGEN.c.p))
            .mappings()
            .all()
        )
    return dict(nf), dict(space), [dict(e) for e in eigen]


def similar_labels(engine: Engine, label: str, limit: int = 5) -> list[str]:
    prefix = label.split("-")[0] + "-"
    with engine.connect() as conn:
        rows = conn.execute(
            select(_NEWFORMS.c.label)
            .where(_NEWFORMS.c.label.like(prefix + "%"))
            .order_by(_NEWFORMS.c.orbit)
            .limit(limit)
        ).all()
    return [r[0] for r in rows]


def summary(engine: Engine) -> dict:
    """Counts for `nfb status`."""
    with engine.connect() as conn:
        per_weight = conn.execute(
            select(
                _SPACES.c.weight,
                _SPACES.c.status,
                func.count(),
                func.min(_SPACES.c.level),
                func.max(_SPACES.c.level),
                func.sum(_SPACES.c.seconds),
                func.sum(_SPACES.c.num_orbits),
            )
            .group_by(_SPACES.c.weight, _SPACES.c.status)
            .order_by(_SPACES.c.weight, _SPACES.c.status)
        ).all()
        n_forms = conn.execute(select(func.count()).select_from(_NEWFORMS)).scalar()
        n_eigen = conn.execute(select(func.count()).select_from(_EIGEN)).scalar()
        runs = conn.execute(select(_RUNS).order_by(_RUNS.c.id.desc()).limit(5)).mappings().all()
        param_sets = conn.execute(
            select(_SPACES.c.trace_bound, _SPACES.c.ap_bound, _SPACES.c.dim_cap, func.count())
            .where(_SPACES.c.status == STATUS_DONE)
            .group_by(_SPACES.c.trace_bound, _SPACES.c.ap_bound, _SPACES.c.dim_cap)
        ).all()
    return {
        "per_weight": [tuple(r) for r in per_weight],
        "newforms": n_forms,
        "eigenvalues": n_eigen,
        "runs": [dict(r) for r in runs],
        "param_sets": [tuple(r) for r in param_sets],
    }
