"""A run is a record that can be checked: a pinned run of the tiny archive gives the same
bytes with one core and with two, `floeheat verify` passes between the two runs and
names a planted change, and a pinned run refuses a changed archive before any job."""

from __future__ import annotations

import csv
import json
import shutil
from pathlib import Path

import pytest

from floeheat.cli import main

pytestmark = pytest.mark.workflow

REPO = Path(__file__).resolve().parents[2]


def _pin(archive: Path, out: Path, name: str) -> Path:
    assert main(["pin", str(archive), "--config", str(REPO / "config/config.yaml"),
                 "--name", name, "--out", str(out),
                 "--schema", str(REPO / "workflow/schemas/config.schema.yaml"),
                 "--lock", str(REPO / "requirements.lock")]) == 0
    return out / f"{name}.yaml"


@pytest.fixture(scope="module")
def pinned_runs(tiny_archive, tmp_path_factory, run_workflow) -> tuple[Path, Path]:
    """The tiny archive pinned, then run twice into fresh folders: --cores 1, --cores 2."""
    base = tmp_path_factory.mktemp("pinned")
    pin = _pin(tiny_archive, base / "runs", "tiny")
    runs = []
    for cores in ("1", "2"):
        results = base / f"results-cores{cores}"
        run_workflow("--configfile", str(pin), "--cores", cores,
                     "--config", f"results={results}")
        runs.append(results)
    return runs[0], runs[1]


def test_manifests_and_outputs_are_identical_across_runs_and_cores(pinned_runs, capsys):
    one, two = pinned_runs
    assert (one / "manifest.json").read_bytes() == (two / "manifest.json").read_bytes()
    assert main(["verify", str(one), "--against", str(two / "manifest.json")]) == 0
    out = capsys.readouterr().out
    assert "0 different, 0 missing, 0 new: all outputs identical" in out
    record = json.loads((one / "manifest.json").read_text())
    assert record["pin"] == {"name": "tiny", "override": False, "overridden": []}
    assert record["requirements_lock_sha256"]
    assert isinstance(record["failed_deployments"], list)
    assert any(k.endswith("budget.zarr") for k in record["outputs"])


def test_verify_reports_a_planted_change_with_its_row_and_column(pinned_runs, tmp_path,
                                                                  capsys):
    one, two = pinned_runs
    copy = tmp_path / "copy"
    shutil.copytree(one, copy, ignore=shutil.ignore_patterns("logs", "work", "forcing"))
    path = copy / "tables" / "seasonal.csv"
    with open(path, newline="") as f:
        rows = list(csv.reader(f))
    header = rows[0]
    col = header.index("q_ow_MJ")
    line = next(i for i, r in enumerate(rows[1:], start=1) if r[col])
    old = rows[line][col]
    rows[line][col] = f"{float(old) + 1:.10g}"
    with open(path, "w", newline="") as f:
        csv.writer(f, lineterminator="\n").writerows(rows)
    assert main(["verify", str(copy), "--against", str(two / "manifest.json")]) == 1
    out = capsys.readouterr().out
    keys = ", ".join(f"{k}={rows[line][header.index(k)]}"
                     for k in ("deployment_id", "source", "radius_m"))
    assert "different  tables/seasonal.csv" in out
    assert (f"line {line + 1} ({keys}): column q_ow_MJ: reference {old}, "
            f"results {rows[line][col]}") in out
    assert "1 different, 0 missing, 0 new" in out


def test_a_pinned_run_refuses_a_changed_archive_before_any_job(archive_copy, tmp_path,
                                                              run_workflow):
    pin = _pin(archive_copy, tmp_path / "runs", "copy")
    target = sorted((archive_copy / "profiles").iterdir())[0]
    data = bytearray(target.read_bytes())
    data[len(data) // 2] ^= 0x01
    target.write_bytes(bytes(data))
    results = tmp_path / "results"
    proc = run_workflow("--configfile", str(pin), "--config", f"results={results}",
                        check=False)
    assert proc.returncode != 0
    text = proc.stdout + proc.stderr
    assert f"changed  profiles/{target.name}" in text
    assert "pin_override=true" in text and "Traceback" not in text
    assert not results.exists()
