"""Plans, resume, extend, executors — through the library API (run_job)."""

from __future__ import annotations

from dataclasses import asdict

import pytest

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
