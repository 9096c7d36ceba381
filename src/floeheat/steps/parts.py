"""Deployments grouped into jobs for the per-deployment stages.

Each workflow job is a fresh interpreter that pays one to two seconds of imports before
it works, so a stage that ran one job per deployment would spend most of a small
archive's time starting up. The per-deployment stages (insitu, match_scenes, radar,
budget) therefore run one job per *part*: a run of consecutive deployments of the sheet,
at most ``jobs.max_per_stage`` parts per stage. Within a job every deployment is still
its own unit: its own status record, its own products, its own failure (one bad
deployment leaves a failed record and the others go on, :func:`floeheat.steps.status.run_stage`).

A job's declared output is the part's record: every member's status record, keyed by
deployment. It changes exactly when a member's status record does (those carry their
products' checksums), so downstream parts rerun only when a member's products changed.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterable
from pathlib import Path

from floeheat.steps.status import read_status, write_json_atomic

__all__ = ["deployment_parts", "part_of", "run_part", "read_part"]

log = logging.getLogger("floeheat")

#: Part names: ``part-<k>`` with k counted from 0 in sheet order.
PART_FORMAT = "part-{:04d}"


def deployment_parts(deployment_ids: Iterable[str], max_jobs: int) -> dict[str, list[str]]:
    """Cut the deployments (in sheet order) into at most ``max_jobs`` parts of equal size
    (the last may be smaller): part name -> deployment ids.

    With no more deployments than ``max_jobs`` every deployment is a part of its own, so
    a changed file reruns that deployment alone; beyond that, a part of ``k`` deployments
    reruns together.

    Examples
    --------
    >>> deployment_parts(["a", "b", "c"], 8)
    {'part-0000': ['a'], 'part-0001': ['b'], 'part-0002': ['c']}
    >>> deployment_parts(list("abcde"), 2)
    {'part-0000': ['a', 'b', 'c'], 'part-0001': ['d', 'e']}
    >>> deployment_parts([], 4)
    {}
    """
    ids = list(deployment_ids)
    if len(set(ids)) != len(ids):
        raise ValueError("deployment ids repeat; the index stage keeps them unique")
    if not ids:
        return {}
    size = -(-len(ids) // max(1, int(max_jobs)))
    return {PART_FORMAT.format(k // size): ids[k:k + size] for k in range(0, len(ids), size)}


def part_of(parts: dict[str, list[str]]) -> dict[str, str]:
    """Deployment id -> its part name.

    Examples
    --------
    >>> part_of({"part-0000": ["a", "b"], "part-0001": ["c"]})
    {'a': 'part-0000', 'b': 'part-0000', 'c': 'part-0001'}
    """
    return {dep: name for name, deps in parts.items() for dep in deps}


def run_part(stage: str, status_paths: dict[str, str], run_one: Callable[[str], object],
             record_path: str | Path) -> dict:
    """Run ``stage`` for every deployment of a part, one after another, then write the
    part's record (``{"stage", "deployments": {id: status record}}``).

    ``status_paths`` maps each member to the status record ``run_one(id)`` writes
    (through :func:`floeheat.steps.status.run_stage`, which records any failure of that
    deployment). A member whose status record is missing afterwards is a fault of the
    stage itself and stops the job: the part's record is not written.
    """
    for dep in status_paths:
        log.info("%s: deployment %s", stage, dep)
        run_one(dep)
    members = {}
    for dep, path in status_paths.items():
        if not Path(path).is_file():
            raise RuntimeError(f"{stage}: no status record {path} for deployment {dep} "
                               "after its run; see the messages above")
        members[dep] = read_status(path)
    record = {"stage": stage, "deployments": members}
    write_json_atomic(Path(record_path), record)
    n_ok = sum(bool(r.get("ok")) for r in members.values())
    log.info("%s: %d of %d deployments ok", stage, n_ok, len(members))
    return record


def read_part(record_path: str | Path) -> dict[str, dict]:
    """The members' status records of a part record: deployment id -> record."""
    return dict(read_status(record_path)["deployments"])
