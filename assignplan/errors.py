"""The exception types the library raises; the CLI maps each to one exit code."""

from __future__ import annotations


class AssignplanError(Exception):
    """Base of every error assignplan reports to a user (never a traceback)."""

    exit_code = 1

    def __init__(self, problems: list[str] | str):
        self.problems = [problems] if isinstance(problems, str) else list(problems)
        super().__init__("\n".join(self.problems))


class InputError(AssignplanError):
    """Bad input or usage: one line per problem, each with its JSON path or file."""

    exit_code = 2


class SolveError(AssignplanError):
    """A method ran but could not produce a plan (e.g. the exact solver found none in time)."""

    exit_code = 1
