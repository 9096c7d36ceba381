"""The workflow through the Slurm profile (profiles/slurm) on a real Slurm cluster.

Needs a cluster that this machine can submit to, with the repository, .venv and the
temporary folders on a filesystem the node shares: ``.ci/slurm-up`` starts a
single-node one (as root, on Debian), ``.ci/slurm-down`` stops it. Without a cluster
(no ``sinfo``, or no idle node) every test here is skipped with the reason, unless
FLOEHEAT_REQUIRE_SLURM=1 (CI sets it) turns the skip into a failure.

The tiny archive is run twice, with the default profile (local) and through Slurm,
and the tables must agree; a broken archive must make the Slurm run fail within its
time limit, naming the failing rule's log.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from floeheat.synth import write_archive

pytestmark = [pytest.mark.slurm, pytest.mark.workflow]

REPO = Path(__file__).resolve().parents[2]
#: Upper bound of one full Slurm run of the tiny archive [s] (about 5 min on 2 cores).
RUN_TIMEOUT = 900
#: Upper bound of the run that must fail at its first job [s].
FAIL_TIMEOUT = 300
#: Job-name prefix of this test process: identifies its jobs for the clean-up.
PREFIX = f"floeheattest{os.getpid()}"
TABLES = ("seasonal.csv", "climatology.csv")


def _cluster_problem() -> str | None:
    """Why no Slurm job can run here (None: a node is idle or partly used)."""
    for tool in ("sinfo", "sbatch", "squeue", "scancel"):
        if shutil.which(tool) is None:
            return f"{tool} not found: no Slurm client here (start a cluster: .ci/slurm-up)"
    try:
        proc = subprocess.run(["sinfo", "--noheader", "--responding", "-o", "%T"],
                              capture_output=True, text=True, timeout=20)
    except subprocess.TimeoutExpired:
        return "sinfo did not answer within 20 s: slurmctld is not reachable"
    if proc.returncode != 0:
        return f"sinfo failed: {proc.stderr.strip() or proc.stdout.strip()}"
    states = {s.strip().rstrip("*~#$@").lower() for s in proc.stdout.split()}
    if not states & {"idle", "mixed"}:
        return f"no idle Slurm node (node states: {', '.join(sorted(states)) or 'none'})"
    return None


def _node_cpus() -> int:
    """The most CPUs of one node (threads of a rule are capped to it)."""
    out = subprocess.run(["sinfo", "--noheader", "-o", "%c"], capture_output=True,
                         text=True, timeout=30).stdout
    return max([int(x.rstrip("+")) for x in out.split() if x.rstrip("+").isdigit()] or [1])


def _cancel_own_jobs() -> None:
    """Cancel jobs left by this process's runs (a run killed by its time limit)."""
    out = subprocess.run(["squeue", "--noheader", "-o", "%i %j"], capture_output=True,
                         text=True, timeout=30).stdout
    ids = [line.split()[0] for line in out.splitlines()
           if len(line.split()) == 2 and line.split()[1].startswith(PREFIX)]
    if ids:
        subprocess.run(["scancel", *ids], capture_output=True, timeout=30)


@pytest.fixture(scope="module")
def slurm_cluster():
    problem = _cluster_problem()
    if problem:
        if os.environ.get("FLOEHEAT_REQUIRE_SLURM") == "1":
            pytest.fail(f"FLOEHEAT_REQUIRE_SLURM=1 but {problem}")
        pytest.skip(problem)
    yield {"cpus": _node_cpus()}
    _cancel_own_jobs()


def _env() -> dict[str, str]:
    """The environment of a run: this interpreter's bin/ (.venv) first on PATH, so jobs
    on the node (sbatch --export=ALL) find the same Python and snakemake."""
    env = dict(os.environ)
    bindir = str(Path(sys.executable).parent)
    env["PATH"] = os.pathsep.join([bindir, env.get("PATH", "")])
    env["VIRTUAL_ENV"] = str(Path(sys.executable).parents[1])
    return env


class _Run:
    """snakemake started from the repository root under `timeout -k` (SIGTERM first, so
    that snakemake cancels its Slurm jobs), output to files (no pipe to fill up)."""

    def __init__(self, args: list[str], limit: int, logdir: Path, name: str):
        cmd = [sys.executable, "-m", "snakemake", *args]
        if shutil.which("timeout"):
            cmd = ["timeout", "-k", "30", str(limit), *cmd]
        logdir.mkdir(parents=True, exist_ok=True)
        self.out, self.err = logdir / f"{name}.stdout", logdir / f"{name}.stderr"
        self.limit = limit
        self.start = time.monotonic()
        with open(self.out, "w") as out, open(self.err, "w") as err:
            self.proc = subprocess.Popen(cmd, cwd=REPO, env=_env(), stdout=out, stderr=err)

    def wait(self) -> tuple[subprocess.CompletedProcess, float]:
        """The finished process (exit code, stdout, stderr) and its duration [s]."""
        try:
            code = self.proc.wait(timeout=self.limit + 60)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            code = self.proc.wait()
        seconds = time.monotonic() - self.start
        return subprocess.CompletedProcess(self.proc.args, code, self.out.read_text(),
                                           self.err.read_text()), seconds


def _slurm_args(cluster, tmp: Path) -> list[str]:
    return ["--profile", "profiles/slurm",
            # the Slurm profile alone, without the implicit workflow profile
            # profiles/default (whose keys would override the Slurm profile's)
            "--workflow-profile", "none",
            "--slurm-logdir", str(tmp / "slurm-logs"),
            "--slurm-jobname-prefix", PREFIX,
            "--max-threads", str(cluster["cpus"])]


def _tail(proc: subprocess.CompletedProcess) -> str:
    return f"exit {proc.returncode}\n--- stdout\n{proc.stdout[-4000:]}\n--- stderr\n" \
           f"{proc.stderr[-8000:]}"


@pytest.fixture(scope="module")
def archive(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("slurm-tiny") / "archive"
    write_archive(root, seed=1, size="tiny")
    return root


@pytest.fixture(scope="module")
def runs(slurm_cluster, archive, tmp_path_factory) -> dict[str, Path]:
    """The tiny archive run locally (profiles/default) and through Slurm."""
    tmp = tmp_path_factory.mktemp("slurm-runs")
    out = {"local": tmp / "local", "slurm": tmp / "slurm"}
    # side by side: the local run fills the gaps while Slurm jobs start and are polled
    slurm = _Run([*_slurm_args(slurm_cluster, tmp), "--config", f"archive={archive}",
                  f"results={out['slurm']}"], RUN_TIMEOUT, tmp, "slurm")
    local = _Run(["--profile", "profiles/default", "--config", f"archive={archive}",
                  f"results={out['local']}"], RUN_TIMEOUT, tmp, "local")
    proc, seconds = local.wait()
    assert proc.returncode == 0, "local run failed: " + _tail(proc)
    proc, seconds = slurm.wait()
    assert proc.returncode == 0, f"Slurm run failed after {seconds:.0f} s: " + _tail(proc)
    # every job went through sbatch (none ran on the submit host but the target rule)
    assert "has been submitted with SLURM jobid" in proc.stderr + proc.stdout
    return out


def test_slurm_tables_equal_local_values(runs):
    for name in TABLES:
        local = pd.read_csv(runs["local"] / "tables" / name)
        slurm = pd.read_csv(runs["slurm"] / "tables" / name)
        assert len(local) > 0, name
        pd.testing.assert_frame_equal(slurm, local, check_exact=False, rtol=1e-9,
                                      obj=name)


def test_slurm_tables_are_byte_identical(runs):
    for name in TABLES:
        local = (runs["local"] / "tables" / name).read_bytes()
        slurm = (runs["slurm"] / "tables" / name).read_bytes()
        assert slurm == local, f"{name} differs byte for byte (values agree)"


def test_a_failing_job_fails_the_slurm_run_and_names_its_log(slurm_cluster, archive,
                                                             tmp_path):
    # deployments.csv without its one required column: checkpoint index stops the run
    broken = tmp_path / "broken-archive"
    broken.mkdir()
    sheet = pd.read_csv(archive / "deployments.csv", dtype=str)
    sheet.drop(columns=["deployment_id"]).to_csv(broken / "deployments.csv", index=False)
    results = tmp_path / "results"
    proc, seconds = _Run([*_slurm_args(slurm_cluster, tmp_path), "--config",
                          f"archive={broken}", f"results={results}"], FAIL_TIMEOUT,
                         tmp_path, "slurm").wait()
    text = proc.stdout + proc.stderr
    assert proc.returncode not in (0, 124, 137), _tail(proc)  # failed, not timed out
    assert seconds < FAIL_TIMEOUT, _tail(proc)
    assert "Error in rule index" in text, _tail(proc)
    rule_log = results / "logs" / "index.log"
    assert str(rule_log) in text, _tail(proc)
    # the Slurm log of the failed job is kept, and named in the output
    slurm_logs = sorted((tmp_path / "slurm-logs" / "rule_index").rglob("*.log"))
    assert slurm_logs, _tail(proc)
    assert any(str(p) in text for p in slurm_logs), _tail(proc)
    assert "required column(s) deployment_id missing" in text + rule_log.read_text() + \
        "".join(p.read_text() for p in slurm_logs)
