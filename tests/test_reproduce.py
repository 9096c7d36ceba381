"""Pinned run configs, the pinned-run guard, the manifest's run record and `verify`."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
import yaml
from jsonschema import Draft202012Validator

from floeheat import __version__
from floeheat.checksums import sha256_file
from floeheat.cli import main
from floeheat.reproduce import (
    PinError,
    PinMismatch,
    check_pin,
    first_csv_difference,
    make_pin,
    pin_differences,
    verify,
)
from floeheat.steps.manifest import run_manifest

REPO = Path(__file__).resolve().parents[1]
SCHEMA = REPO / "workflow" / "schemas" / "config.schema.yaml"
CONFIG = REPO / "config" / "config.yaml"
LOCK = REPO / "requirements.lock"


@pytest.fixture()
def archive(tmp_path) -> Path:
    """A small stand-in archive: the pin and the guard read bytes only."""
    root = tmp_path / "archive"
    for rel, data in {
        "deployments.csv": b"deployment_id,array_id\nA1,A\n",
        "profiles/A1.nc": bytes(range(256)) * 4,
        "icemass/A1.nc": b"\x89HDF\r\n" + b"\0" * 100,
        "scenes/S1.tif": b"II*\0" + b"\1" * 64,
    }.items():
        (root / rel).parent.mkdir(parents=True, exist_ok=True)
        (root / rel).write_bytes(data)
    return root


def _pin(archive: Path, tmp_path: Path, config=CONFIG, name="unit") -> Path:
    assert main(["pin", str(archive), "--config", str(config), "--name", name,
                 "--out", str(tmp_path / "runs"), "--schema", str(SCHEMA),
                 "--lock", str(LOCK)]) == 0
    return tmp_path / "runs" / f"{name}.yaml"


def _schema_keys(schema: dict, prefix=()):
    """Every settings key path the schema defines (the pin block's insides left out)."""
    for key, sub in schema.get("properties", {}).items():
        if key == "pin" and not prefix:
            yield (key,)
            continue
        yield prefix + (key,)
        yield from _schema_keys(sub, prefix + (key,))


def test_pin_writes_every_setting_the_version_and_every_checksum(archive, tmp_path):
    path = _pin(archive, tmp_path)
    pin = yaml.safe_load(path.read_text())
    schema = yaml.safe_load(SCHEMA.read_text())
    for keys in _schema_keys(schema):
        node = pin
        for k in keys:
            assert k in node, f"{'.'.join(keys)} left implicit in the pin"
            node = node[k]
    assert pin["archive"] == str(archive)
    assert pin["pin_override"] is False
    block = pin["pin"]
    assert block["name"] == "unit"
    assert block["floeheat_version"] == __version__
    assert block["requirements_lock_sha256"] == sha256_file(LOCK)
    assert block["archive_files"] == {
        rel: sha256_file(archive / rel)
        for rel in ("deployments.csv", "icemass/A1.nc", "profiles/A1.nc", "scenes/S1.tif")}
    assert "budget" in block["settings_sha256"] and "archive" not in block["settings_sha256"]
    # The pinned file is itself a valid workflow config, and its own run is the pinned run.
    assert not list(Draft202012Validator(schema).iter_errors(pin))
    assert check_pin(pin, LOCK) == []


def test_pin_fills_defaults_around_a_partial_config(archive, tmp_path):
    partial = tmp_path / "partial.yaml"
    partial.write_text("budget:\n  albedo_ow: 0.08\n")
    pin = yaml.safe_load(_pin(archive, tmp_path, config=partial).read_text())
    assert pin["budget"] == {"albedo_ow": 0.08, "window_days": 15.0,
                             "weight_by_ice_fraction": True}
    assert pin["radar"]["mask_codes"] == {"water": 0, "ice": 1, "nodata": 255}


def test_a_changed_byte_in_one_archive_file_is_refused_naming_that_file(archive, tmp_path):
    config = yaml.safe_load(_pin(archive, tmp_path).read_text())
    data = bytearray((archive / "profiles/A1.nc").read_bytes())
    data[100] ^= 0x01
    (archive / "profiles/A1.nc").write_bytes(bytes(data))
    with pytest.raises(PinMismatch) as refusal:
        check_pin(config, LOCK)
    message = str(refusal.value)
    assert "changed  profiles/A1.nc" in message
    for other in ("deployments.csv", "icemass/A1.nc", "scenes/S1.tif"):
        assert other not in message
    assert "pin_override=true" in message


def test_a_new_and_a_missing_file_are_both_listed(archive, tmp_path):
    config = yaml.safe_load(_pin(archive, tmp_path).read_text())
    (archive / "scenes/S1.tif").unlink()
    (archive / "scenes/S2.tif").write_bytes(b"II*\0")
    with pytest.raises(PinMismatch) as refusal:
        check_pin(config, LOCK)
    message = str(refusal.value)
    assert "missing  scenes/S1.tif" in message
    assert "new      scenes/S2.tif" in message
    assert "2 ways" in message


def test_changed_settings_and_software_are_refused(archive, tmp_path):
    config = yaml.safe_load(_pin(archive, tmp_path).read_text())
    config["budget"]["albedo_ow"] = 0.1
    config["pin"]["floeheat_version"] = "0.0.1"
    kinds = {(d.kind, d.what) for d in pin_differences(config, LOCK)}
    assert kinds == {("settings", "budget"), ("software", "floeheat")}
    with pytest.raises(PinMismatch, match="settings budget"):
        check_pin(config, LOCK)


def test_the_override_lets_the_run_through_and_the_manifest_records_it(archive, tmp_path):
    config = yaml.safe_load(_pin(archive, tmp_path).read_text())
    (archive / "icemass/A1.nc").write_bytes(b"changed")
    for value in (True, "true"):  # --config pin_override=true gives the string
        config["pin_override"] = value
        assert [str(d.what) for d in check_pin(config, LOCK)] == ["icemass/A1.nc"]
    results = _fake_results(tmp_path / "results")
    record = run_manifest(str(archive), str(results), dict(config, results=str(results)),
                          str(results / "manifest.json"), lock=str(LOCK))
    assert record["pin"]["name"] == "unit"
    assert record["pin"]["override"] is True
    assert record["pin"]["overridden"][0].startswith("changed  icemass/A1.nc")
    assert record["requirements_lock_sha256"] == sha256_file(LOCK)
    assert record["failed_deployments"] == [{"deployment_id": "B2", "stage": "insitu"}]
    assert "results" not in record["config"]
    text = (results / "manifest.json").read_text()
    assert json.loads(text) == record
    assert list(json.loads(text)) == sorted(json.loads(text))


def test_an_unpinned_run_records_no_pin(archive, tmp_path):
    results = _fake_results(tmp_path / "results")
    record = run_manifest(str(archive), str(results), {"archive": str(archive), "pin": None},
                          str(results / "manifest.json"), lock=str(tmp_path / "absent.lock"))
    assert record["pin"] is None
    assert record["requirements_lock_sha256"] is None
    assert check_pin({"archive": str(archive), "pin": None}) == []


# ------------------------------------------------------------------- bad input to pin


def test_pin_errors_name_the_file_and_the_fix(archive, tmp_path, capsys):
    out = ["--out", str(tmp_path / "runs"), "--schema", str(SCHEMA), "--lock", str(LOCK)]
    assert main(["pin", str(tmp_path), "--name", "x", *out]) == 2
    err = capsys.readouterr().err
    assert f"{tmp_path}: not an archive (no deployments.csv" in err and "Fix:" in err
    bad = tmp_path / "bad.yaml"
    bad.write_text("budget:\n  albedo_ow: [0.1\n")
    assert main(["pin", str(archive), "--config", str(bad), "--name", "x", *out]) == 2
    err = capsys.readouterr().err
    assert f"{bad}: line" in err and "not valid YAML" in err
    bad.write_text("budget:\n  albedo_ow: 2.0\nradar:\n  radii: [1]\n")
    assert main(["pin", str(archive), "--config", str(bad), "--name", "x", *out]) == 2
    err = capsys.readouterr().err
    assert "budget.albedo_ow: 2.0 is greater than the maximum of 1" in err
    assert "radar: Additional properties are not allowed ('radii'" in err
    assert main(["pin", str(archive), "--name", "../escape", *out]) == 2
    err = capsys.readouterr().err
    assert "not usable as a file name" in err and "Traceback" not in err
    assert not (tmp_path / "runs").exists()


def test_make_pin_of_a_pin_starts_again_from_its_settings(archive, tmp_path):
    first = _pin(archive, tmp_path)
    again = make_pin(archive, first, "unit", SCHEMA, LOCK)
    assert again == yaml.safe_load(first.read_text())
    with pytest.raises(PinError, match="no such file"):
        make_pin(archive, tmp_path / "none.yaml", "unit", SCHEMA, LOCK)


# ------------------------------------------------------------------------------ verify


def _write_csv(path: Path, rows: list[list[str]]) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", newline="") as f:
        csv.writer(f, lineterminator="\n").writerows(rows)


SEASONAL = [["deployment_id", "source", "radius_m", "t_ice"],
            ["A1", "radar", "2000", "0.1"], ["A1", "radar", "4000", "0.2"],
            ["B2", "", "", ""]]


def _fake_results(root: Path) -> Path:
    _write_csv(root / "tables/seasonal.csv", SEASONAL)
    _write_csv(root / "tables/climatology.csv", [["region", "month"], ["r1", "7"]])
    _write_csv(root / "tables/failures.csv", [["deployment_id", "stage", "message"],
                                               ["B2", "insitu", "no profiles"]])
    (root / "deployments/A1/budget.zarr/t").mkdir(parents=True)
    (root / "deployments/A1/budget.zarr/zarr.json").write_text("{}")
    (root / "figures").mkdir()
    (root / "figures/basin.png").write_bytes(b"\x89PNG")
    (root / "figures/.snakemake_timestamp").write_text("")
    return root


def _manifest(results: Path) -> Path:
    run_manifest(str(results), str(results), {}, str(results / "manifest.json"))
    return results / "manifest.json"


def test_verify_passes_identical_outputs(tmp_path, capsys):
    ref = _manifest(_fake_results(tmp_path / "ref"))
    _fake_results(tmp_path / "new")
    assert main(["verify", str(tmp_path / "new"), "--against", str(ref)]) == 0
    assert "5 identical, 0 different, 0 missing, 0 new" in capsys.readouterr().out


def test_verify_names_the_differing_row_and_column_and_missing_and_new(tmp_path, capsys):
    ref = _manifest(_fake_results(tmp_path / "ref"))
    new = _fake_results(tmp_path / "new")
    rows = [r[:] for r in SEASONAL]
    rows[2][3] = "0.25"
    _write_csv(new / "tables/seasonal.csv", rows)
    (new / "figures/basin.png").unlink()
    (new / "figures/extra.png").write_bytes(b"\x89PNG")
    assert main(["verify", str(new), "--against", str(ref)]) == 1
    out = capsys.readouterr().out
    assert "different  tables/seasonal.csv" in out
    assert ("line 3 (deployment_id=A1, source=radar, radius_m=4000): column t_ice: "
            "reference 0.2, results 0.25") in out
    assert "missing    figures/basin.png" in out
    assert "new        figures/extra.png" in out
    assert "3 identical, 1 different, 1 missing, 1 new" in out


def test_verify_says_when_the_reference_table_is_not_beside_the_manifest(tmp_path):
    ref = _manifest(_fake_results(tmp_path / "ref"))
    elsewhere = tmp_path / "elsewhere" / "manifest.json"
    elsewhere.parent.mkdir()
    elsewhere.write_text(ref.read_text())
    new = _fake_results(tmp_path / "new")
    _write_csv(new / "tables/climatology.csv", [["region", "month"], ["r1", "8"]])
    report = verify(new, elsewhere)
    (check,) = [c for c in report.checks if c.status != "identical"]
    assert check.path == "tables/climatology.csv"
    assert "reference table" in check.details[0] and "not there" in check.details[0]


def test_verify_errors_exit_2_with_a_message(tmp_path, capsys):
    results = _fake_results(tmp_path / "r")
    assert main(["verify", str(results), "--against", str(tmp_path / "none.json")]) == 2
    assert "none.json: no such file" in capsys.readouterr().err
    (tmp_path / "list.json").write_text("[1, 2]")
    assert main(["verify", str(results), "--against", str(tmp_path / "list.json")]) == 2
    assert "not a manifest" in capsys.readouterr().err
    (tmp_path / "text.json").write_text("tables/seasonal.csv abc\n")
    assert main(["verify", str(results), "--against", str(tmp_path / "text.json")]) == 2
    assert "not a manifest (not JSON" in capsys.readouterr().err
    ref = _manifest(results)
    assert main(["verify", str(tmp_path / "gone"), "--against", str(ref)]) == 2
    assert "gone: no such results folder" in capsys.readouterr().err


def test_first_csv_difference_rows_only_on_one_side(tmp_path):
    _write_csv(tmp_path / "a.csv", SEASONAL)
    _write_csv(tmp_path / "b.csv", SEASONAL[:3])
    assert first_csv_difference(tmp_path / "a.csv", tmp_path / "b.csv", ["deployment_id"]) \
        == "line 4: a row only in the reference (deployment_id=B2)"
    _write_csv(tmp_path / "c.csv", [["deployment_id", "t"], ["A1", "1"]])
    assert first_csv_difference(tmp_path / "a.csv", tmp_path / "c.csv").startswith(
        "line 1: the header differs")
