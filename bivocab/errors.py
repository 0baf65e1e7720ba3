"""Errors a user can cause. The CLI prints them as one line and exits 2 (or 1 for failed checks)."""

from __future__ import annotations


class BivocabError(Exception):
    """A problem with the user's recipe, inputs or output directory (exit code 2)."""

    exit_code = 2


class RecipeError(BivocabError):
    """The recipe is malformed: unknown key, wrong type, missing table, bad value."""


class InputError(BivocabError):
    """An input file is missing, unreadable or holds data we refuse to guess about."""


class LineError(InputError):
    """An input problem at one line of a file, kept in parts so that a scan worker, which
    counts the lines of its block from 1, can have the build add the lines before the block."""

    def __init__(self, display: str, line: int, problem: str):
        super().__init__(f"{display}:{line}: {problem}")
        self.display, self.line, self.problem = display, line, problem

    def __reduce__(self) -> tuple:   # pickled by its parts (a worker hands it to the build)
        return (type(self), (self.display, self.line, self.problem))

    def shifted(self, lines_before: int) -> LineError:
        """The same problem, ``lines_before`` lines further down the file."""
        return LineError(self.display, self.line + lines_before, self.problem)


class OutputError(BivocabError):
    """The output directory cannot be used (foreign files, locked, unwritable, disk full)."""


class CheckFailed(BivocabError):
    """A check ran and found a problem (verify mismatch, strict probe); exit code 1."""

    exit_code = 1


def where(path: object, line: int | None = None) -> str:
    """Format a file position the way every message in bivocab names it: ``path:line``."""
    return f"{path}:{line}" if line is not None else f"{path}"
