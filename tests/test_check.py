"""Tests of ``floeheat check`` (floeheat.check) on the tiny demo and a corpus of broken
copies of it (tests/broken_archives.py), each with one defect."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pandas as pd
import pytest

import floeheat.check as check_module
from broken_archives import BROKEN, derive, own, tiny_clean
from floeheat.check import CheckReport, check_archive, format_report
from floeheat.cli import main
from floeheat.errors import ArchiveProblem


@pytest.fixture(scope="session")
def clean(tmp_path_factory) -> Path:
    return tiny_clean(tmp_path_factory)


@pytest.fixture(scope="session")
def truth(clean) -> dict:
    return json.loads((clean.with_name("archive.truth") / "truth.json").read_text())


@pytest.fixture(scope="session")
def clean_report(clean) -> CheckReport:
    return check_archive(clean)


def run_cli(root: Path, monkeypatch, capsys) -> tuple[int, str, CheckReport]:
    """Run ``floeheat check ROOT``; return the exit status, all output and the report the
    command printed (recorded on the way, so the archive is checked once)."""
    seen: list[CheckReport] = []
    real = check_module.check_archive

    def recording(path, **kwargs):
        seen.append(real(path, **kwargs))
        return seen[-1]

    monkeypatch.setattr(check_module, "check_archive", recording)
    status = main(["check", str(root)])
    captured = capsys.readouterr()
    return status, captured.out + captured.err, seen[0]


def _edit_rows(path: Path, edit) -> None:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    rows = edit(rows)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)


# ---------------------------------------------------------------- the clean archive


def test_clean_archive_has_no_blocking_problem(clean_report):
    assert not clean_report.blocking, "\n".join(map(str, clean_report.errors))


def test_clean_summary_lists_every_deployment(clean_report, truth):
    by_id = {s["deployment_id"]: s for s in clean_report.summary}
    assert set(by_id) == set(truth["deployments"])
    for dep, t in truth["deployments"].items():
        s = by_id[dep]
        assert s["instruments"] == "profiler+string"
        assert s["n_profiles"] > 2 and s["n_string_times"] > 2
        assert s["window_start"] == pd.Timestamp(t["window_start"]).tz_localize(None)
        assert s["window_end"] == pd.Timestamp(t["window_end"]).tz_localize(None)
        assert s["overlap_start"] <= s["window_start"] < s["window_end"] <= s["overlap_end"]
        assert s["shortwave_covers"] is True
        assert s["shortwave_source"] == ("CSV" if t["shortwave_file"] else "gridded")
        assert s["concentration_covers"] is True
        # footprint coverage is an upper bound of the valid coverage the truth counts
        assert s["mask_scenes_near"] >= t["n_scenes_served"] > 0
        assert s["n_fixes"] > 100 and not s["blocked"]


def test_clean_archive_warns_about_dead_sensors_only(clean_report):
    assert clean_report.warnings
    assert all("sensor at depth" in p.where for p in clean_report.warnings)


def test_clean_cli_exits_0(clean, monkeypatch, capsys, truth):
    status, out, _ = run_cli(clean, monkeypatch, capsys)
    assert status == 0
    assert "Traceback" not in out
    for dep in truth["deployments"]:
        assert dep in out
    assert out.strip().splitlines()[-1].startswith("Verdict: READY")


# ---------------------------------------------------------------- the broken corpus


def test_corpus_is_large_enough():
    assert len(BROKEN) >= 15


@pytest.mark.parametrize("name", sorted(BROKEN))
def test_broken_archive_is_reported(name, clean, tmp_path, monkeypatch, capsys):
    defect = BROKEN[name]
    root = derive(clean, tmp_path / "archive")
    defect.mutate(root)
    status, out, report = run_cli(root, monkeypatch, capsys)
    assert status == 1, out
    assert "Traceback" not in out
    hits = [p for p in report.errors if p.file == defect.file and defect.where in p.where
            and defect.text in str(p)]
    assert hits, f"expected a blocking problem in {defect.file} at {defect.where!r}; got:\n" + \
        "\n".join(map(str, report.problems))
    assert str(hits[0]) in out
    assert out.strip().splitlines()[-1].startswith("Verdict: NOT READY")


def test_derived_copy_leaves_the_clean_archive_alone(clean, tmp_path):
    before = (clean / "deployments.csv").read_bytes()
    root = derive(clean, tmp_path / "archive")
    BROKEN["duplicate_id"].mutate(root)
    BROKEN["unknown_units"].mutate(root)
    assert (clean / "deployments.csv").read_bytes() == before
    assert (root / "deployments.csv").read_bytes() != before
    assert (root / "profiles/skua-2.nc").is_symlink()  # unchanged files are links
    assert not (root / "profiles/skua-1.nc").is_symlink()


def test_every_problem_is_listed_at_once(clean, tmp_path):
    root = derive(clean, tmp_path / "archive")
    names = ["bad_iso_time", "unknown_units", "icemass_time_not_increasing",
             "scene_without_crs", "truncated_netcdf", "invalid_scene_content"]
    for name in names:
        BROKEN[name].mutate(root)
    report = check_archive(root)
    for name in names:
        d = BROKEN[name]
        assert any(p.file == d.file and d.where in p.where for p in report.errors), name
    # the row set aside (bad start time) still names its files: none is "ignored"
    assert not any("it is ignored" in p.problem for p in report.problems)
    assert any(s["deployment_id"] == "fulmar-1 (line 4)" and s["blocked"]
               for s in report.summary)


def test_unexpected_reader_failure_names_the_file(clean, tmp_path, monkeypatch, capsys):
    import floeheat.io.profiles

    def broken_reader(path):
        raise RuntimeError("something deep inside a library")

    monkeypatch.setattr(floeheat.io.profiles, "read_profiles", broken_reader)
    status, out, report = run_cli(clean, monkeypatch, capsys)
    assert status == 1 and "Traceback" not in out
    files = {p.file for p in report.errors if "RuntimeError" in p.problem}
    assert files == {"profiles/skua-1.nc", "profiles/skua-2.nc", "profiles/fulmar-1.csv"}


# ---------------------------------------------------------------- warnings only


def test_missing_instrument_is_a_warning(clean, tmp_path, monkeypatch, capsys):
    root = derive(clean, tmp_path / "archive")

    def blank(rows):
        rows[3][rows[0].index("profile_file")] = ""
        return rows

    _edit_rows(own(root, "deployments.csv"), blank)
    status, out, report = run_cli(root, monkeypatch, capsys)
    assert status == 0, out
    hit = [p for p in report.warnings if p.file == "deployments.csv"
           and p.where == "line 4, column profile_file"]
    assert hit and "fulmar-1" in hit[0].problem
    fulmar = next(s for s in report.summary if s["deployment_id"] == "fulmar-1")
    assert fulmar["instruments"] == "string" and not fulmar["blocked"]


def test_no_scene_near_a_track_is_a_warning(clean, tmp_path):
    root = derive(clean, tmp_path / "archive")
    _edit_rows(own(root, "scenes.csv"),
               lambda rows: [r for r in rows if not r[0].startswith("fulmar")])
    report = check_archive(root)
    assert not report.blocking, "\n".join(map(str, report.errors))
    assert any(p.file == "scenes.csv" and p.where == "deployment fulmar-1"
               for p in report.warnings)
    fulmar = next(s for s in report.summary if s["deployment_id"] == "fulmar-1")
    assert fulmar["scenes_near"] == 0


def test_concentration_short_of_the_window_is_a_warning(clean, tmp_path):
    root = derive(clean, tmp_path / "archive")
    (root / "concentration/pm_202507.nc").unlink()
    report = check_archive(root)
    assert not report.blocking, "\n".join(map(str, report.errors))
    assert any(p.file == "concentration/pm_202506.nc" and "time_bnds" in p.where
               for p in report.warnings)
    assert all(s["concentration_covers"] is False for s in report.summary)


# ---------------------------------------------------------------- report text


def test_format_report_orders_errors_warnings_summary_verdict(tmp_path):
    report = CheckReport(root=tmp_path, problems=[
        ArchiveProblem("b.nc", "variable t", "warned", "nothing", blocking=False),
        ArchiveProblem("a.csv", "line 2, column x", "broken", "mend it"),
        ArchiveProblem("a.csv", "line 3, column x", "broken too", "mend it"),
    ], summary=[{"deployment_id": "d-1", "instruments": "profiler", "n_profiles": 3,
                 "profile_start": pd.Timestamp("2025-06-01"),
                 "profile_end": pd.Timestamp("2025-06-09"), "blocked": True}])
    text = format_report(report)
    lines = text.splitlines()
    i_err = next(i for i, t in enumerate(lines) if t.startswith("Errors"))
    i_warn = next(i for i, t in enumerate(lines) if t.startswith("Warnings"))
    i_table = next(i for i, t in enumerate(lines) if t.startswith("deployment "))
    assert i_err < i_warn < i_table
    assert lines[i_err + 1].strip() == "a.csv"  # grouped by file
    assert "a.csv: line 3, column x: broken too. Fix: mend it." in text
    assert "2025-06-01..06-09" in text and "BLOCKED" in text
    assert lines[-1].startswith("Verdict: NOT READY (2 errors, 1 warning")


def test_missing_folder(tmp_path, monkeypatch, capsys):
    status, out, report = run_cli(tmp_path / "nowhere", monkeypatch, capsys)
    assert status == 1 and "Traceback" not in out
    assert "does not exist" in report.errors[0].problem
