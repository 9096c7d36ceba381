"""Stage status records and atomic writes.

Every per-deployment stage ends with a small JSON status record: ``ok`` true with the
paths of its products, or ``ok`` false with the stage and a message. A deployment whose
inputs fail thus leaves a record (collected into failures.csv) and no partial products,
while the others go on. Products are written to a temporary path beside their final
place and moved there only when complete.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import traceback
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import TypeVar

from floeheat.checksums import sha256_tree
from floeheat.errors import ArchiveError

__all__ = ["atomic_path", "write_json_atomic", "read_status", "run_stage", "attempt",
           "StageFailed", "setup_logging"]

log = logging.getLogger("floeheat")

T = TypeVar("T")


class StageFailed(RuntimeError):
    """A stage cannot produce its outputs for a reason worth telling the user."""


@contextmanager
def atomic_path(final: Path) -> Iterator[Path]:
    """Yield a temporary sibling path; move it onto ``final`` only on success.

    Works for files and directories (Zarr stores). On error the temporary path is
    removed and ``final`` is left as it was.

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp())
    >>> with atomic_path(d / "a.txt") as tmp:
    ...     _ = tmp.write_text("done")
    >>> (d / "a.txt").read_text()
    'done'
    """
    final = Path(final)
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = final.with_name(f".{final.name}.partial-{os.getpid()}")
    _remove(tmp)
    try:
        yield tmp
        _remove(final)
        os.replace(tmp, final)
    finally:
        _remove(tmp)


def _remove(path: Path) -> None:
    if path.is_dir() and not path.is_symlink():
        shutil.rmtree(path)
    elif path.exists() or path.is_symlink():
        path.unlink()


def write_json_atomic(path: Path, record: dict) -> None:
    """Write ``record`` as sorted, indented JSON, atomically."""
    with atomic_path(Path(path)) as tmp:
        tmp.write_text(json.dumps(record, indent=2, sort_keys=True, default=str) + "\n")


def read_status(path: Path) -> dict:
    """Read a stage status record."""
    return json.loads(Path(path).read_text())


def setup_logging(log_path: str | os.PathLike | None) -> None:
    """Send the package's log records to a rule's log file."""
    handlers: list[logging.Handler] = [logging.StreamHandler()]
    if log_path:
        Path(log_path).parent.mkdir(parents=True, exist_ok=True)
        handlers = [logging.FileHandler(log_path, mode="w")]
    logging.basicConfig(level=logging.INFO, handlers=handlers, force=True,
                        format="%(levelname)s %(name)s: %(message)s")
    # the units registry announces every unit it redefines at import: not news to a user
    logging.getLogger("pint").setLevel(logging.ERROR)


def attempt(stage: str, deployment_id: str, work: Callable[[], T]) -> tuple[T | None, str]:
    """Run one deployment's ``work``; ``(products, "")`` or, when it fails, ``(None,
    message)``. A bad input (ArchiveError, StageFailed) gives its own message; any other
    failure is logged with its traceback and never stops the other deployments."""
    try:
        return work(), ""
    except (ArchiveError, StageFailed) as exc:
        log.error("%s failed for %s: %s", stage, deployment_id, exc)
        return None, str(exc)
    except Exception as exc:  # an unforeseen failure must not stop other deployments
        log.error("%s failed for %s:\n%s", stage, deployment_id, traceback.format_exc())
        return None, (f"unexpected error ({type(exc).__name__}: {exc}); "
                      "see the stage log for details")


def run_stage(stage: str, deployment_id: str, status_path: Path,
              work: Callable[[], dict], upstream: list[Path] | None = None) -> dict:
    """Run one deployment's stage and write its status record.

    Parameters
    ----------
    stage : str
        Stage name (as in failures.csv).
    deployment_id : str
        The deployment.
    status_path : Path
        Where the status record goes (the rule's declared output).
    work : callable
        Does the stage's work, writing its products atomically, and returns a dict of
        product paths and summary values for the record.
    upstream : list of Path
        Status records of the stages this one needs; a failed one is passed on.

    Returns
    -------
    dict
        The status record written.
    """
    record = {"stage": stage, "deployment_id": deployment_id}
    for path in upstream or []:
        prior = read_status(path)
        if not prior.get("ok"):
            record.update(ok=False, failed_stage=prior.get("failed_stage", prior["stage"]),
                          message=prior.get("message", ""))
            write_json_atomic(status_path, record)
            log.info("%s: skipped, upstream stage %s failed", stage, record["failed_stage"])
            return record
    products, message = attempt(stage, deployment_id, work)
    if products is None:
        record.update(ok=False, failed_stage=stage, message=message)
    else:
        record.update(ok=True, **products)
        # The products' checksums make the record change exactly when a product does,
        # so downstream jobs rerun when (and only when) their real inputs changed.
        record["checksums"] = {key: sha256_tree(value) for key, value in products.items()
                               if isinstance(value, str) and value and Path(value).exists()}
    write_json_atomic(status_path, record)
    return record
