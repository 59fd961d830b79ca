"""SpaceRecord ⇄ table rows (pure functions; no database access).

``record_to_rows`` gives the rows of one unit for the spaces, newforms and
eigenvalues tables; ``rows_to_record`` rebuilds the identical ``SpaceRecord``
(same ``content_hash()``), which the tests check for every stored unit.

Characters: the unit's character orbit (``char_order``, ``char_conductor``,
``char_parity``, ``char_number``, ``char_degree``) is stored in ``spaces``, and
``char_order`` is copied into every newform row. ``rel_dim`` (the degree over Q(χ))
is stored as given; a record that leaves it None (records older than
RECORD_VERSION 2; the math core sets it on every orbit now) is stored with
``rel_dim = dim`` and read back with that value.
"""

from __future__ import annotations

from builder.forms.record import RECORD_VERSION, NewformRecord, SpaceRecord
from builder.storage.models import STATUS_DONE


def al_pattern(atkin_lehner: dict[int, int]) -> str:
    """{2: -1, 3: 1} → "2-3+": each prime p | N, increasing, followed by its sign."""
    return "".join(f"{p}{'+' if s > 0 else '-'}" for p, s in sorted(atkin_lehner.items()))


CHAR_COLUMNS = ("char_order", "char_conductor", "char_parity", "char_number", "char_degree")


def character_columns(N: int, char_index: int) -> dict:
    """The character columns of the unit (N, k, char_index) from builder/characters.py
    (for rows without a record: failed units)."""
    from builder.characters import character_orbit

    chi = character_orbit(N, char_index)  # ValueError naming char_index if there is none
    return {
        "char_order": chi.order,
        "char_conductor": chi.conductor,
        "char_parity": chi.parity,
        "char_number": chi.number,
        "char_degree": chi.degree,
    }


def space_row(rec: SpaceRecord, run_id: int | None) -> dict:
    p = rec.params
    return {
        "level": rec.level,
        "weight": rec.weight,
        "char_index": rec.char_index,
        **{c: int(getattr(rec, c)) for c in CHAR_COLUMNS},
        "status": STATUS_DONE,
        "dim_cusp": rec.dim_cusp,
        "dim_new": rec.dim_new,
        "dim_old": rec.dim_old,
        "dim_eis": rec.dim_eis,
        "num_orbits": rec.num_orbits,
        "sturm_bound": rec.sturm_bound,
        "seconds": float(rec.seconds),
        "content_hash": rec.content_hash(),
        "params": dict(p),
        "trace_bound": p["trace_bound"],
        "ap_bound": p["ap_bound"],
        "dim_cap": p["dim_cap"],
        "record_version": rec.record_version,
        "run_id": run_id,
        "error": None,
    }


def newform_row(rec: SpaceRecord, f: NewformRecord) -> dict:
    primes = sorted(int(p) for p in f.atkin_lehner)
    return {
        "label": f.label,
        "level": rec.level,
        "weight": rec.weight,
        "char_index": rec.char_index,
        "char_order": int(rec.char_order),
        "orbit": f.orbit,
        "dim": f.dim,
        "rel_dim": f.dim if f.rel_dim is None else int(f.rel_dim),
        "field_poly": [int(c) for c in f.field_poly],
        "field_disc": None if f.field_disc is None else str(f.field_disc),
        "traces": [int(t) for t in f.traces],
        "al_primes": primes,
        "al_signs": [int(f.atkin_lehner[p]) for p in primes],
        "al_pattern": al_pattern(f.atkin_lehner),
        "fricke_sign": f.fricke_sign,
        "root_number": f.root_number,
        "is_cm": bool(f.is_cm),
        "cm_disc": f.cm_disc,
        "lvalue_zero": None if f.lvalue_zero is None else bool(f.lvalue_zero),
        "l_ratio": f.l_ratio,
        "hecke_poly_2": None if f.hecke_poly_2 is None else [int(c) for c in f.hecke_poly_2],
        "has_ap": f.ap is not None,
        "al_pseudo_primes": sorted(int(p) for p in f.al_pseudo or {}),
        "al_pseudo_values": None if f.al_pseudo is None else [
            [str(c) for c in f.al_pseudo[p]] for p in sorted(f.al_pseudo)],
    }


def eigen_rows(f: NewformRecord) -> list[dict]:
    if f.ap is None:
        return []
    return [
        {"label": f.label, "p": int(p), "coords": [str(c) for c in f.ap[p]]} for p in sorted(f.ap)
    ]


def record_to_rows(rec: SpaceRecord, run_id: int | None = None) -> tuple[dict, list, list]:
    forms = sorted(rec.newforms, key=lambda f: f.orbit)
    newforms = [newform_row(rec, f) for f in forms]
    eigen = [row for f in forms for row in eigen_rows(f)]
    return space_row(rec, run_id), newforms, eigen


def rows_to_record(space: dict, newforms: list[dict], eigen: list[dict]) -> SpaceRecord:
    by_label: dict[str, dict[int, list[str]]] = {}
    for e in eigen:
        by_label.setdefault(e["label"], {})[int(e["p"])] = list(e["coords"])
    forms = []
    for n in sorted(newforms, key=lambda r: r["orbit"]):
        signs = zip(n["al_primes"], n["al_signs"], strict=True)
        forms.append(
            NewformRecord(
                label=n["label"],
                orbit=n["orbit"],
                dim=n["dim"],
                field_poly=list(n["field_poly"]),
                field_disc=n["field_disc"],
                traces=list(n["traces"]),
                atkin_lehner={int(p): int(s) for p, s in signs},
                fricke_sign=n["fricke_sign"],
                root_number=n["root_number"],
                is_cm=bool(n["is_cm"]),
                cm_disc=n["cm_disc"],
                lvalue_zero=None if n["lvalue_zero"] is None else bool(n["lvalue_zero"]),
                l_ratio=n["l_ratio"],
                ap=(by_label.get(n["label"], {}) if n["has_ap"] else None),
                hecke_poly_2=None if n["hecke_poly_2"] is None else list(n["hecke_poly_2"]),
                rel_dim=n["rel_dim"],
                al_pseudo=None if n["al_pseudo_values"] is None else {
                    int(p): list(v) for p, v in zip(n["al_pseudo_primes"],
                                                    n["al_pseudo_values"], strict=True)},
            )
        )
    return SpaceRecord(
        level=space["level"],
        weight=space["weight"],
        char_index=space["char_index"],
        dim_cusp=space["dim_cusp"],
        dim_new=space["dim_new"],
        dim_old=space["dim_old"],
        dim_eis=space["dim_eis"],
        num_orbits=space["num_orbits"],
        sturm_bound=space["sturm_bound"],
        params=dict(space["params"]),
        newforms=forms,
        seconds=space["seconds"],
        record_version=space["record_version"] or RECORD_VERSION,
        **{c: space[c] for c in CHAR_COLUMNS},
    )
