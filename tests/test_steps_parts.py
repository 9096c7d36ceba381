"""floeheat.steps.parts: deployments cut into jobs, and a part's record."""

import json

import pytest

from floeheat.errors import ArchiveError
from floeheat.steps.parts import deployment_parts, part_of, read_part, run_part
from floeheat.steps.status import run_stage


@pytest.mark.parametrize("n, max_jobs", [(1, 24), (24, 24), (25, 24), (200, 24), (7, 3),
                                         (128, 24), (5, 1)])
def test_parts_cover_every_deployment_once_in_sheet_order(n, max_jobs):
    ids = [f"dep-{k:03d}" for k in range(n)]
    parts = deployment_parts(ids, max_jobs)
    assert len(parts) <= max_jobs
    assert [d for members in parts.values() for d in members] == ids
    sizes = [len(m) for m in parts.values()]
    # equal parts, the last one possibly smaller
    assert all(s == sizes[0] for s in sizes[:-1]) and 0 < sizes[-1] <= sizes[0]
    if n <= max_jobs:
        assert sizes == [1] * n
    assert set(part_of(parts)) == set(ids)


def test_repeated_ids_are_refused():
    with pytest.raises(ValueError, match="repeat"):
        deployment_parts(["a", "a"], 4)


def test_one_failing_deployment_leaves_its_record_and_the_others_go_on(tmp_path):
    status = {d: str(tmp_path / d / "status.json") for d in ("a", "b", "c")}

    def one(dep):
        def work():
            if dep == "b":
                raise ArchiveError.at("b/profiles.nc", "variable sea_water_pressure",
                                      "has no units attribute", "add units")
            return {"value": dep}
        return run_stage("insitu", dep, status[dep], work)

    record = run_part("insitu", status, one, tmp_path / "part.json")
    members = read_part(tmp_path / "part.json")
    assert list(members) == ["a", "b", "c"]
    assert [members[d]["ok"] for d in "abc"] == [True, False, True]
    assert "profiles.nc" in members["b"]["message"]
    assert record["deployments"] == members
    # the part's record is exactly its members' status records
    for d in "abc":
        assert json.loads((tmp_path / d / "status.json").read_text()) == members[d]


def test_a_member_without_status_record_stops_the_job_without_a_record(tmp_path):
    status = {"a": str(tmp_path / "a.json"), "b": str(tmp_path / "b.json")}

    def one(dep):
        if dep == "a":
            run_stage("radar", dep, status[dep], lambda: {})

    with pytest.raises(RuntimeError, match="b.json"):
        run_part("radar", status, one, tmp_path / "part.json")
    assert not (tmp_path / "part.json").exists()
