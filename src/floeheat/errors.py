"""Errors that reach the user: each names the place, the problem and the fix."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["ArchiveProblem", "ArchiveError"]


@dataclass(frozen=True)
class ArchiveProblem:
    """One problem found in an archive.

    Parameters
    ----------
    file : str
        Path of the file, relative to the archive root where possible.
    where : str
        The variable, column, row or attribute concerned ("" for the whole file).
    problem : str
        What is wrong, in one sentence.
    fix : str
        How to fix it, in one sentence.
    blocking : bool
        True when processing cannot go on with this problem (an error);
        False for a warning.

    Examples
    --------
    >>> p = ArchiveProblem("deployments.csv", "line 3, column deployment_id",
    ...                    "duplicate ID 'B1'", "give each row an ID")
    >>> str(p)
    "deployments.csv: line 3, column deployment_id: duplicate ID 'B1'. Fix: give each row an ID."
    """

    file: str
    where: str
    problem: str
    fix: str
    blocking: bool = True

    def __str__(self) -> str:
        place = f"{self.file}: {self.where}" if self.where else self.file
        problem = self.problem.rstrip(".")
        fix = self.fix.rstrip(".")
        return f"{place}: {problem}. Fix: {fix}."


class ArchiveError(ValueError):
    """Raised by the reader layer when an input cannot be read as the format says.

    Carries one or more :class:`ArchiveProblem`; ``str()`` lists them all.
    """

    def __init__(self, *problems: ArchiveProblem):
        if not problems:
            raise TypeError("ArchiveError needs at least one ArchiveProblem")
        self.problems = tuple(problems)
        super().__init__("\n".join(str(p) for p in self.problems))

    @classmethod
    def at(cls, file: str, where: str, problem: str, fix: str) -> ArchiveError:
        """Build an error with a single problem.

        Examples
        --------
        >>> str(ArchiveError.at("a.nc", "variable T", "no units", "add a units attribute"))
        'a.nc: variable T: no units. Fix: add a units attribute.'
        """
        return cls(ArchiveProblem(file, where, problem, fix))
