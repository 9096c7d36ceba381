"""Run records that can be checked: pinned run configs, the archive guard and ``verify``.

A *pinned run config* (``config/runs/<name>.yaml``) is a complete workflow config (every
setting resolved, no default left implicit) plus a ``pin`` block holding what the run
depends on besides its settings: the floeheat version, the sha256 of requirements.lock,
a sha256 per settings section and the sha256 of every archive file (paths relative to
the archive root). :func:`check_pin`, called by the Snakefile after validation, refuses
a run whose archive, settings or software differ from its pin unless ``pin_override``
is true; the manifest then records what was overridden.

:func:`verify` compares the outputs of a results folder with a manifest and, for a CSV
table that differs, names the first differing row and column.

This module never imports Snakemake: the Snakefile passes it the config.
"""

from __future__ import annotations

import copy
import csv
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

from floeheat import ARCHIVE_FORMAT_VERSION, __version__
from floeheat.checksums import sha256_file

__all__ = [
    "PIN_KEY", "OVERRIDE_KEY", "NOT_SETTINGS", "KEY_COLUMNS", "PinError", "PinMismatch",
    "Difference", "load_yaml", "resolve_config", "settings_checksums", "archive_checksums",
    "lock_checksum", "make_pin", "write_pin", "pin_differences", "override_requested",
    "check_pin",
    "OutputCheck", "VerifyReport", "verify", "first_csv_difference", "format_verify",
]

#: Config key of the pin block and of the explicit override.
PIN_KEY = "pin"
OVERRIDE_KEY = "pin_override"
#: Keys that say where a run reads and writes, not how it computes: the archive is
#: pinned by its files' checksums, and the results folder is free.
LOCATION_KEYS = ("archive", "results")
#: How the work is cut into jobs: the outputs are the same for any value.
JOB_KEYS = ("jobs",)
#: Top-level config keys that are not settings of the computation.
NOT_SETTINGS = LOCATION_KEYS + JOB_KEYS + (PIN_KEY, OVERRIDE_KEY)
#: Columns that identify a row of each output table (shown for a differing row).
KEY_COLUMNS = {
    "seasonal.csv": ("deployment_id", "source", "radius_m"),
    "climatology.csv": ("region", "month", "ice_type", "source", "radius_m"),
    "failures.csv": ("deployment_id", "stage"),
    "windows.csv": ("deployment_id", "source", "radius_m", "window_start"),
}
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


class PinError(ValueError):
    """A problem with the user's input to ``pin`` or ``verify``: names the file, what is
    wrong and how to fix it."""


class PinMismatch(RuntimeError):
    """The guard's refusal: the run differs from its pin (the message lists how)."""


@dataclass(frozen=True, order=True)
class Difference:
    """One way a run differs from its pin.

    ``kind`` is one of ``changed``, ``missing``, ``new`` (archive files), ``settings``
    or ``software``; ``what`` names the file, settings section or package.
    """

    kind: str
    what: str
    detail: str = ""

    def __str__(self) -> str:
        return f"{self.kind:<9}{self.what}" + (f"  ({self.detail})" if self.detail else "")


# ---------------------------------------------------------------------------- pinning


def load_yaml(path) -> dict:
    """Read a YAML mapping; a problem raises :class:`PinError` naming the file."""
    import yaml

    path = Path(path)
    if not path.is_file():
        raise PinError(f"{path}: no such file. Fix: give the path of an existing YAML file.")
    try:
        data = yaml.safe_load(path.read_text())
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"line {mark.line + 1}: " if mark is not None else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise PinError(f"{path}: {where}not valid YAML ({problem}). "
                       "Fix: correct the YAML syntax there.") from None
    if data is None:
        return {}
    if not isinstance(data, dict):
        raise PinError(f"{path}: holds a {type(data).__name__}, not a mapping of settings. "
                       "Fix: write the settings as 'key: value' lines.")
    return data


def _fill_defaults(instance, schema: dict):
    """Fill schema defaults into a config, recursively (copies of the defaults)."""
    if not isinstance(instance, dict) or "properties" not in schema:
        return instance
    for key, sub in schema["properties"].items():
        if key not in instance and "default" in sub:
            instance[key] = copy.deepcopy(sub["default"])
        if key in instance:
            _fill_defaults(instance[key], sub)
    return instance


def resolve_config(config: dict, schema: dict, source: str = "the config") -> dict:
    """The config with every default of ``schema`` filled in, validated.

    Raises :class:`PinError` listing every violation (key path and problem).

    Examples
    --------
    >>> schema = {"type": "object", "properties": {
    ...     "a": {"type": "object", "default": {}, "properties": {
    ...         "b": {"type": "number", "default": 2.0}}}}}
    >>> resolve_config({}, schema)
    {'a': {'b': 2.0}}
    """
    from jsonschema import Draft202012Validator

    resolved = _fill_defaults(copy.deepcopy(config), schema)
    errors = sorted(Draft202012Validator(schema).iter_errors(resolved),
                    key=lambda e: [str(p) for p in e.absolute_path])
    if errors:
        lines = [f"  {'.'.join(str(p) for p in e.absolute_path) or '(top level)'}: "
                 f"{e.message}" for e in errors]
        raise PinError(f"{source}: settings that the schema refuses:\n" + "\n".join(lines) +
                       "\nFix: correct these keys (config/config.yaml describes each).")
    return resolved


def _canonical(value) -> bytes:
    return json.dumps(value, sort_keys=True, separators=(",", ":"), default=str).encode()


def settings_checksums(config: dict) -> dict[str, str]:
    """sha256 of each settings section of a resolved config (locations and the pin block
    left out).

    Examples
    --------
    >>> sorted(settings_checksums({"archive": "a", "budget": {"albedo_ow": 0.066}}))
    ['budget']
    """
    import hashlib

    return {key: hashlib.sha256(_canonical(value)).hexdigest()
            for key, value in sorted(config.items()) if key not in NOT_SETTINGS}


def archive_checksums(archive) -> dict[str, str]:
    """sha256 of every file of an archive, by path relative to its root (sorted)."""
    from floeheat.steps.manifest import archive_files

    root = Path(archive)
    return {p.relative_to(root).as_posix(): sha256_file(p) for p in archive_files(root)}


def lock_checksum(lock) -> str | None:
    """sha256 of the lock file (requirements.lock), or None when it is absent."""
    return sha256_file(lock) if lock and Path(lock).is_file() else None


def make_pin(archive, config_path, name: str, schema_path, lock_path) -> dict:
    """A pinned run config: the resolved config of ``config_path`` run on ``archive``,
    with its ``pin`` block (see the module docstring)."""
    if not _NAME.match(name or ""):
        raise PinError(f"pin name {name!r}: not usable as a file name. Fix: use letters, "
                       "digits, '.', '_' or '-' (up to 64, starting with a letter or digit).")
    archive_p = Path(archive)
    if not (archive_p / "deployments.csv").is_file():
        raise PinError(f"{archive_p}: not an archive (no deployments.csv in it). "
                       "Fix: give the archive root folder, the one holding deployments.csv.")
    schema = load_yaml(schema_path)
    config = load_yaml(config_path)
    # A pin of a pin starts again from its settings.
    config.pop(PIN_KEY, None)
    config.pop(OVERRIDE_KEY, None)
    config["archive"] = str(archive).rstrip("/") or str(archive)
    resolved = resolve_config(config, schema, source=str(config_path))
    resolved[OVERRIDE_KEY] = False
    resolved[PIN_KEY] = {
        "name": name,
        "floeheat_version": __version__,
        "archive_format_version": ARCHIVE_FORMAT_VERSION,
        "requirements_lock_sha256": lock_checksum(lock_path),
        "settings_sha256": settings_checksums(resolved),
        "archive_files": archive_checksums(archive_p),
    }
    return resolved


def write_pin(pin: dict, out_dir) -> Path:
    """Write a pinned run config as ``<out_dir>/<name>.yaml``; returns its path."""
    import yaml

    name = pin[PIN_KEY]["name"]
    path = Path(out_dir) / f"{name}.yaml"
    path.parent.mkdir(parents=True, exist_ok=True)
    header = (
        f"# Pinned run '{name}', written by `floeheat pin`: every setting resolved (none\n"
        "# left to a default), with the floeheat version, the sha256 of requirements.lock\n"
        "# and of every archive file. Run it with\n"
        f"#   snakemake --profile profiles/default --configfile {path.as_posix()}\n"
        "# The run refuses to start when the archive, settings or software differ from\n"
        "# the pin, unless given --config pin_override=true (recorded in the manifest).\n"
        "# Pin again with `floeheat pin` rather than editing this file by hand.\n"
    )
    body = yaml.safe_dump(pin, sort_keys=True, default_flow_style=False, width=100)
    tmp = path.with_name(f".{path.name}.tmp")
    tmp.write_text(header + body)
    tmp.replace(path)
    return path


# ----------------------------------------------------------------------------- guard


def pin_differences(config: dict, lock_path=None) -> list[Difference]:
    """How a resolved run config (with a ``pin`` block) differs from its pin: archive
    files changed, missing or new, settings sections changed, software changed.
    Sorted; empty when the run is the pinned run."""
    pin = config.get(PIN_KEY)
    if not pin:
        return []
    diffs: list[Difference] = []
    archive = Path(str(config["archive"]))
    pinned = pin.get("archive_files") or {}
    if not archive.is_dir():
        diffs.append(Difference("missing", str(archive), f"the whole archive folder, "
                                                         f"{len(pinned)} pinned files"))
    now = archive_checksums(archive) if archive.is_dir() else dict(pinned)
    for rel in sorted(set(pinned) | set(now)):
        if rel not in now:
            diffs.append(Difference("missing", rel, "pinned, not in the archive"))
        elif rel not in pinned:
            diffs.append(Difference("new", rel, "in the archive, not pinned"))
        elif now[rel] != pinned[rel]:
            diffs.append(Difference("changed", rel, f"sha256 {now[rel][:12]}, pinned "
                                                    f"{pinned[rel][:12]}"))
    pinned_settings = pin.get("settings_sha256") or {}
    settings = settings_checksums(config)
    for key in sorted(set(pinned_settings) | set(settings)):
        if key not in pinned_settings:
            diffs.append(Difference("settings", key, "a section the pin does not hold"))
        elif settings.get(key) != pinned_settings[key]:
            diffs.append(Difference("settings", key, "differs from the pinned values"))
    if pin.get("floeheat_version") != __version__:
        diffs.append(Difference("software", "floeheat",
                                f"{__version__}, pinned {pin.get('floeheat_version')}"))
    lock_now, lock_pinned = lock_checksum(lock_path), pin.get("requirements_lock_sha256")
    if lock_pinned and lock_now != lock_pinned:
        diffs.append(Difference("software", "requirements.lock",
                                f"sha256 {(lock_now or 'absent')[:12]}, pinned "
                                f"{lock_pinned[:12]}"))
    return sorted(diffs)


def override_requested(config: dict) -> bool:
    """Whether the config asks to run despite differences from the pin (``pin_override``
    true, or the string "true" that ``--config pin_override=true`` gives).

    Examples
    --------
    >>> override_requested({"pin_override": "true"}), override_requested({})
    (True, False)
    """
    value = config.get(OVERRIDE_KEY, False)
    return value.lower() == "true" if isinstance(value, str) else bool(value)


def check_pin(config: dict, lock_path=None) -> list[Difference]:
    """The pinned-run guard (called by the Snakefile after validation).

    Does nothing for a config without a ``pin`` block. For a pinned run, raises
    :class:`PinMismatch` listing every difference from the pin, unless
    ``pin_override`` is true; returns the differences.
    """
    diffs = pin_differences(config, lock_path)
    if not diffs or override_requested(config):
        return diffs
    name = config[PIN_KEY].get("name", "?")
    archive = str(config["archive"])
    lines = [f"pinned run '{name}' refused: it differs from its pin in {len(diffs)} "
             f"way{'s' if len(diffs) > 1 else ''} (archive {archive}):"]
    lines += [f"  {d}" for d in diffs]
    if not Path(archive).is_dir():
        lines.append(f"The archive folder {archive} does not exist.")
        if archive == "demo-archive":
            demo = config.get("demo") or {}
            lines.append("Synthesize the demo archive first: floeheat synth demo-archive "
                         f"--size {demo.get('size', 'demo')} --seed {demo.get('seed', 1)}")
    lines.append("Fix: restore the pinned archive, settings and software; or pin again "
                 f"(floeheat pin {archive} --config PINNED.yaml --name {name}); or run "
                 "anyway with --config pin_override=true (the manifest records the override).")
    raise PinMismatch("\n".join(lines))


# ---------------------------------------------------------------------------- verify


@dataclass
class OutputCheck:
    """The verdict on one output: identical, different, missing or new."""

    path: str
    status: str
    details: list[str] = field(default_factory=list)


@dataclass
class VerifyReport:
    results: str
    manifest: str
    checks: list[OutputCheck]

    @property
    def ok(self) -> bool:
        return all(c.status == "identical" for c in self.checks)

    def count(self, status: str) -> int:
        return sum(c.status == status for c in self.checks)


def _read_manifest(path: Path) -> dict:
    if not path.is_file():
        raise PinError(f"{path}: no such file. Fix: give the path of a manifest.json "
                       "written by a run (RESULTS/manifest.json).")
    try:
        record = json.loads(path.read_text())
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise PinError(f"{path}: not a manifest (not JSON: {exc}). Fix: give the "
                       "manifest.json written by a run.") from None
    if not isinstance(record, dict) or not isinstance(record.get("outputs"), dict):
        raise PinError(f"{path}: not a manifest (no 'outputs' mapping of checksums). "
                       "Fix: give the manifest.json written by a run.")
    return record


def _read_rows(path: Path) -> list[list[str]]:
    with open(path, newline="") as f:
        return list(csv.reader(f))


def first_csv_difference(reference, results, key_columns=()) -> str:
    """The first difference between two CSV tables, as one sentence: the line (header
    line 1), the row's key columns, the column and both values.

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> _ = (d / "a.csv").write_text("id,x\\nA,1\\nB,2\\n")
    >>> _ = (d / "b.csv").write_text("id,x\\nA,1\\nB,3\\n")
    >>> first_csv_difference(d / "a.csv", d / "b.csv", ["id"])
    'line 3 (id=B): column x: reference 2, results 3'
    """
    ref, new = _read_rows(Path(reference)), _read_rows(Path(results))
    if not ref or not new:
        return "one of the tables is empty"
    if ref[0] != new[0]:
        return f"line 1: the header differs: reference {','.join(ref[0])}; " \
               f"results {','.join(new[0])}"
    header = ref[0]
    keys = [header.index(k) for k in key_columns if k in header] or [0]
    for i in range(1, max(len(ref), len(new))):
        if i >= len(ref):
            return f"line {i + 1}: a row only in results " \
                   f"({', '.join(f'{header[k]}={new[i][k]}' for k in keys if k < len(new[i]))})"
        if i >= len(new):
            return f"line {i + 1}: a row only in the reference " \
                   f"({', '.join(f'{header[k]}={ref[i][k]}' for k in keys if k < len(ref[i]))})"
        if ref[i] != new[i]:
            key = ", ".join(f"{header[k]}={ref[i][k]}" for k in keys if k < len(ref[i]))
            for j, col in enumerate(header):
                a = ref[i][j] if j < len(ref[i]) else ""
                b = new[i][j] if j < len(new[i]) else ""
                if a != b:
                    return f"line {i + 1} ({key}): column {col}: reference {a or '(empty)'}, " \
                           f"results {b or '(empty)'}"
            return f"line {i + 1} ({key}): a different number of fields"
    return "the same rows (the bytes differ: line endings or quoting)"


def verify(results, manifest) -> VerifyReport:
    """Compare the outputs of a results folder with a manifest's checksums.

    Raises :class:`PinError` when the folder or the manifest is missing or the manifest
    is not one.
    """
    from floeheat.steps.manifest import output_checksums

    results_p, manifest_p = Path(results), Path(manifest)
    record = _read_manifest(manifest_p)
    if not results_p.is_dir():
        raise PinError(f"{results_p}: no such results folder. Fix: give the folder a run "
                       "wrote (the workflow's results setting).")
    expected = record["outputs"]
    actual = output_checksums(results_p)
    checks = []
    for rel in sorted(set(expected) | set(actual)):
        if rel not in actual:
            checks.append(OutputCheck(rel, "missing"))
        elif rel not in expected:
            checks.append(OutputCheck(rel, "new"))
        elif actual[rel] == expected[rel]:
            checks.append(OutputCheck(rel, "identical"))
        else:
            check = OutputCheck(rel, "different")
            if rel.endswith(".csv"):
                ref = manifest_p.parent / rel
                if ref.is_file():
                    check.details.append(first_csv_difference(
                        ref, results_p / rel, KEY_COLUMNS.get(Path(rel).name, ())))
                else:
                    check.details.append(
                        f"reference table {ref} not there, so the differing row cannot be "
                        "shown (put the reference run's tables beside its manifest)")
            checks.append(check)
    return VerifyReport(str(results_p), str(manifest_p), checks)


def format_verify(report: VerifyReport, all_lines: bool = False) -> str:
    """The verify report: one line per output that is not identical (every output with
    ``all_lines``), then the counts."""
    lines = [f"verify {report.results} against {report.manifest}"]
    for c in report.checks:
        if c.status != "identical" or all_lines:
            lines.append(f"  {c.status:<10} {c.path}")
            lines.extend(f"             {d}" for d in c.details)
    counts = ", ".join(f"{report.count(s)} {s}"
                       for s in ("identical", "different", "missing", "new"))
    lines.append(f"{counts}: " + ("all outputs identical" if report.ok else
                                  "the outputs differ from the manifest"))
    return "\n".join(lines)
