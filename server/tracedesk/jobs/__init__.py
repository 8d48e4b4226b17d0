"""Background work: a job table shared by all workers, an in-process pool by default, RQ on Redis to scale out.

A job's effects are written in the same transaction that marks it succeeded, so a worker killed mid-job leaves
nothing half-applied: the job stays "running" with an old heartbeat until `recover_stale_jobs` re-queues it (or
marks it failed after its last attempt).
"""
