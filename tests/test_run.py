"""Plans, resume, extend, executors — through the library API (run_job)."""

from __future__ import annotations

import io
from dataclasses import asdict

import pytest
from rich.console import Console

from builder.pipeline.errors import BadInput, UnitsFailed
from builder.pipeline.executors import Executor, Outcome, SerialExecutor
from builder.pipeline.jobs import load_job
from builder.pipeline.run import DEFAULT_MODEL, fit_model, plan_job, psi, run_job, sturm_bound
from builder.storage.db import make_engine
from builder.storage.parquet import export
from builder.storage.reader import unit_states
from tests.nfb_helpers import SMALL, parquet_bytes, snapshot, tree_listing


def job_for(tmp_path, name="out", **over):
    return load_job(None, {**SMALL, "out": str(tmp_path / name), **over})


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """An uninterrupted serial run of the SMALL job."""
    d = tmp_path_factory.mktemp("ref")
    job = load_job(None, {**SMALL, "out": str(d / "out")})
    summary = run_job(job, progress="none")
    engine = make_engine(job.db_url)
    export(engine, d / "notimes", timings=False)
    engine.dispose()
    return {"job": job, "summary": summary, "snap": snapshot(job.db_url), "dir": d}


def test_psi_and_sturm():
    assert [psi(n) for n in (1, 2, 6, 11, 12, 100)] == [1, 3, 12, 12, 24, 180]
    assert sturm_bound(11, 2) == 2 and sturm_bound(100, 4) == 60


def test_reference_run(reference):
    s, snap, job = reference["summary"], reference["snap"], reference["job"]
    assert s.status == "done" and s.computed == len(job.units()) and not s.failed
    assert len(snap["spaces"]) == len(job.units())
    assert all(st == "done" for st, _ in snap["spaces"].values())
    assert snap["labels"] == sorted(set(snap["labels"]))
    assert (job.out / "nfb.log").exists()
    assert set(parquet_bytes(job.out / "parquet")) == {"spaces", "newforms", "eigenvalues"}


def test_rerun_is_a_no_op(reference, tmp_path):
    job = reference["job"]
    s = run_job(job, progress="none")
    assert s.status == "nothing-to-do" and s.computed == 0 and s.skipped == len(job.units())
    assert snapshot(job.db_url) == reference["snap"]


def test_workers_2_identical_to_serial(reference, tmp_path):
    job = job_for(tmp_path, workers=2)
    run_job(job, progress="none")
    assert snapshot(job.db_url) == reference["snap"]
    ref_pq = parquet_bytes(reference["job"].out / "parquet")
    got = parquet_bytes(job.out / "parquet")
    assert got["newforms"] == ref_pq["newforms"] and got["eigenvalues"] == ref_pq["eigenvalues"]
    engine = make_engine(job.db_url)
    export(engine, tmp_path / "notimes", timings=False)
    engine.dispose()
    assert parquet_bytes(tmp_path / "notimes") == parquet_bytes(reference["dir"] / "notimes")


def test_extend_levels_computes_only_the_new_units(reference, tmp_path):
    small = job_for(tmp_path, levels="1-20")
    run_job(small, progress="none")
    bigger = job_for(tmp_path, levels="1-30")
    plan = plan_job(bigger)
    assert plan.skipped == 2 * 20 and len(plan.todo) == 2 * 10
    assert all(u[0] > 20 for u in plan.todo)
    s = run_job(bigger, progress="none")
    assert s.computed == 20
    assert snapshot(bigger.db_url) == reference["snap"]


def test_other_bounds_refused_unless_extend(tmp_path):
    job = job_for(tmp_path, levels="1-12")
    run_job(job, progress="none")
    before = snapshot(job.db_url)
    bigger = job_for(tmp_path, levels="1-12", trace_bound=60)
    with pytest.raises(BadInput) as e:
        run_job(bigger, progress="none")
    msg = str(e.value)
    assert "newforms.sqlite" in msg and "key 'trace_bound'" in msg and "--extend" in msg
    assert snapshot(job.db_url) == before
    # extending: every unit is recomputed with the larger bound, nothing else changes
    s = run_job(bigger, extend=True, progress="none")
    assert s.computed == 24
    states = unit_states(make_engine(bigger.db_url))
    assert {st.params["trace_bound"] for st in states.values()} == {60}
    fresh = job_for(tmp_path, name="fresh", levels="1-12", trace_bound=60)
    run_job(fresh, progress="none")
    assert snapshot(fresh.db_url) == snapshot(bigger.db_url)
    # ... and lowering a bound is refused even with --extend
    smaller = job_for(tmp_path, levels="1-12", trace_bound=30)
    with pytest.raises(BadInput, match="only grows"):
        run_job(smaller, extend=True, progress="none")


def test_dry_run_writes_nothing(tmp_path, capsys):
    job = job_for(tmp_path)
    s = run_job(job, dry_run=True, progress="lines")
    assert s.status == "dry-run" and s.planned == len(job.units())
    assert not job.out.exists()
    err = capsys.readouterr().err
    assert "to compute" in err and "estimate" in err


def test_dry_run_uses_measured_rates(reference):
    plan = plan_job(reference["job"])
    assert plan.todo == []
    states = unit_states(make_engine(reference["job"].db_url))
    model = fit_model(states, reference["job"].params)
    assert "fitted on" in model.source
    assert set(model.fits) == {2, 4} and all(B > 0 for _, B in model.fits.values())
    assert model.fits != DEFAULT_MODEL
    assert all(model.predict(u) > 0 for u in reference["job"].units())


def test_plan_order_is_canonical(tmp_path):
    job = job_for(tmp_path, levels="5,1-3", weights="4,2")
    assert plan_job(job).todo == [
        (1, 2, 0),
        (2, 2, 0),
        (3, 2, 0),
        (5, 2, 0),
        (1, 4, 0),
        (2, 4, 0),
        (3, 4, 0),
        (5, 4, 0),
    ]


class FailingOn(Executor):
    """Runs units serially but reports a compute failure for one of them."""

    def __init__(self, bad):
        super().__init__()
        self.bad = bad

    def run(self, units, params):
        for out in SerialExecutor().run(units, params):
            if out.unit == self.bad:
                out = Outcome(out.unit, None, "Traceback (most recent call last):\n boom", 0.1)
            yield out


def test_failed_unit_is_recorded_and_retried(tmp_path):
    job = job_for(tmp_path, levels="1-8", weights="2")
    with pytest.raises(UnitsFailed, match="5w2"):
        run_job(job, progress="none", executor=FailingOn((5, 2, 0)))
    states = unit_states(make_engine(job.db_url))
    assert states[(5, 2, 0)].status == "failed" and len(states) == 8
    assert (job.out / "parquet" / "spaces" / "part-0.parquet").exists()
    assert "5w2 FAILED" in (job.out / "nfb.log").read_text()
    plan = plan_job(job)
    assert plan.todo == [(5, 2, 0)]
    s = run_job(job, progress="none")
    assert s.computed == 1 and s.status == "done"


def test_record_mismatch_is_a_failure(tmp_path):
    class Wrong(Executor):
        def run(self, units, params):
            from builder.forms.record import Params, compute_unit

            for u in units:
                rec = compute_unit(u[0] + 1, u[1], Params(**params))
                yield Outcome(u, rec, None, 0.0)

    job = job_for(tmp_path, levels="3", weights="2")
    with pytest.raises(UnitsFailed):
        run_job(job, progress="none", executor=Wrong())
    assert unit_states(make_engine(job.db_url))[(3, 2, 0)].status == "failed"


def test_unwritable_output_parent(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    job = load_job(None, {**SMALL, "out": str(blocker / "out")})
    with pytest.raises(BadInput) as e:
        run_job(job, progress="none")
    assert "not a directory" in str(e.value) and "--out" in str(e.value)
    assert tree_listing(tmp_path) == ["file"]


def test_params_recorded_in_runs_table(reference):
    from sqlalchemy import select

    from builder.storage.models import Run

    engine = make_engine(reference["job"].db_url)
    with engine.connect() as conn:
        runs = conn.execute(select(Run.__table__).order_by(Run.__table__.c.id)).mappings().all()
    engine.dispose()
    assert runs[0]["status"] == "done"
    assert runs[0]["params"] == asdict(reference["job"].params)
    assert runs[0]["code_version"].startswith("0.") and runs[0]["host"]
    assert runs[0]["units_done"] == len(reference["job"].units())


def test_every_stored_unit_round_trips(reference):
    """Reading a unit back gives the record the worker returned (same content hash)."""
    from builder.storage.reader import load_space

    engine = make_engine(reference["job"].db_url)
    for (N, k, c), (_, digest) in reference["snap"]["spaces"].items():
        assert load_space(engine, N, k, c).content_hash() == digest, (N, k)
    engine.dispose()


# ----------------------------------------------------------------------------- characters

CHARS = {
    "levels": "11-13",
    "weights": "2,3",
    "characters": "all",
    "trace_bound": 50,
    "ap_bound": 20,
}


@pytest.fixture(scope="module")
def with_characters(tmp_path_factory):
    """A tiny run with every character (levels 11-13, weights 2 and 3)."""
    d = tmp_path_factory.mktemp("chars")
    job = load_job(None, {**CHARS, "out": str(d / "out")})
    plan = plan_job(job)
    summary = run_job(job, progress="none")
    return {"job": job, "plan": plan, "summary": summary, "snap": snapshot(job.db_url)}


def test_character_plan(with_characters):
    plan, job = with_characters["plan"], with_characters["job"]
    # even weight: the even orbits (13: orders 1, 2, 3, 6); odd weight: the odd ones only
    assert plan.todo == job.units() == [
        (11, 2, 0), (11, 2, 2), (12, 2, 0), (12, 2, 3), (13, 2, 0), (13, 2, 1), (13, 2, 2),
        (13, 2, 4), (11, 3, 1), (11, 3, 3), (12, 3, 1), (12, 3, 2), (13, 3, 3), (13, 3, 5),
    ]  # fmt: skip
    assert plan.total == 14 and plan.skipped == 0
    assert "default model" in plan.model.source
    assert all(plan.estimates[u] > 0 for u in plan.todo)


def test_character_run_stores_every_unit(with_characters):
    import sqlite3

    from builder.characters import character_orbits

    s, job, snap = with_characters["summary"], with_characters["job"], with_characters["snap"]
    assert s.status == "done" and s.computed == 14 and not s.failed
    assert sorted(snap["spaces"]) == sorted(job.units())
    assert all(st == "done" for st, _ in snap["spaces"].values())
    con = sqlite3.connect(job.out / "newforms.sqlite")
    try:
        rows = con.execute(
            "select level, weight, char_index, char_order, char_parity, char_conductor from spaces"
        ).fetchall()
        labels = [r[0] for r in con.execute("select label from newforms where char_index > 0")]
        job_json = con.execute("select job from runs").fetchone()[0]
    finally:
        con.close()
    for N, k, j, order, parity, conductor in rows:
        chi = character_orbits(N)[j]
        assert (order, parity, conductor) == (chi.order, chi.parity, chi.conductor)
        assert parity == (-1) ** k
    assert labels and all("c" in lab.split("w")[1] for lab in labels)
    assert "13w2c4-1" in snap["labels"]  # the newform of level 13, weight 2, order-6 χ
    assert '"characters": "all"' in job_json or '"characters":"all"' in job_json


def test_character_units_round_trip(with_characters):
    from builder.storage.reader import load_space

    engine = make_engine(with_characters["job"].db_url)
    for (N, k, c), (_, digest) in with_characters["snap"]["spaces"].items():
        assert load_space(engine, N, k, c).content_hash() == digest, (N, k, c)
    engine.dispose()


def test_character_rerun_and_other_selection(with_characters):
    job = with_characters["job"]
    assert run_job(job, progress="none").status == "nothing-to-do"
    # the selection is not a bound: another selection on the same database just plans
    # other units (done ones are skipped, nothing is refused)
    base = {**CHARS, "out": str(job.out)}
    triv = load_job(None, {**base, "weights": "2", "characters": "trivial"})
    plan = plan_job(triv)
    assert plan.todo == [] and plan.skipped == 3
    more = load_job(None, {**base, "levels": "11-14", "characters": "order:1,2"})
    plan = plan_job(more)
    assert plan.todo == [(14, 2, 0), (14, 3, 1)]
    assert plan.skipped == len(more.units()) - 2
    s = run_job(more, progress="none")
    assert s.computed == 2
    # the units outside the new selection are still there
    assert set(with_characters["snap"]["spaces"]) <= set(snapshot(job.db_url)["spaces"])
    # the measured character units now drive the estimates of the next plan
    model = plan_job(load_job(None, {**base, "levels": "11-20"})).model
    assert "nontrivial characters fitted on" in model.source


def test_character_plan_render_and_warning(tmp_path):
    job = job_for(tmp_path, levels="1-13", weights="2,3,5", characters="order:2")
    out = io.StringIO()
    plan = plan_job(job)
    plan.render(Console(file=out, width=200))
    text = out.getvalue()
    assert "characters order:2" in text
    assert "weight 3:" in text and "nontrivial χ" in text and f"units: {plan.total}" in text
    assert plan.total == len(job.units())
    assert not any("no units of weight" in w for w in plan.warnings)
    job = job_for(tmp_path, levels="1-4", weights="2,3", characters="index:1")
    plan = plan_job(job)
    assert plan.todo == [(3, 3, 1), (4, 3, 1)]
    assert any("no units of weight 2" in w for w in plan.warnings)


def test_character_model_families():
    from builder.forms.record import Params
    from builder.pipeline.run import DEFAULT_CHAR_MODEL, cost_feature

    model = fit_model({}, Params(100, 20, 6))
    assert model.char_fallback == DEFAULT_CHAR_MODEL and model.char_trace_bound == 100
    # x = (k−1)·ψ(N)·[Q(χ):Q]: the order-6 orbit mod 13 has degree 2
    assert cost_feature((13, 2, 4)) == 2 * cost_feature((13, 2, 0)) == 28.0
    assert model.predict((13, 2, 4)) > 0 and model.predict((13, 3, 5)) > 0


def test_failed_character_unit_is_retried(tmp_path):
    job = job_for(tmp_path, levels="13", weights="2", characters="all")
    with pytest.raises(UnitsFailed, match="13w2c2"):
        run_job(job, progress="none", executor=FailingOn((13, 2, 2)))
    states = unit_states(make_engine(job.db_url))
    assert states[(13, 2, 2)].status == "failed" and len(states) == 4
    assert plan_job(job).todo == [(13, 2, 2)]
    assert run_job(job, progress="none").computed == 1
