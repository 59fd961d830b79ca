"""The batch builder: job files, plans, executors, resumable runs.

Library entry points (the CLI in ``builder.cli`` is a thin face over these):

    from builder.pipeline.jobs import load_job
    from builder.pipeline.run import run_job, plan_job

    job = load_job("jobs/quickstart.toml", overrides={"workers": 2})
    summary = run_job(job)
"""
