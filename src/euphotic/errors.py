"""Error types. Every message names the file (or config key) and the problem in one line."""

from __future__ import annotations

from pathlib import Path


class EuphoticError(ValueError):
    """Base class for errors the command line reports as one clear line."""


class ConfigError(EuphoticError):
    """The configuration file is missing a key, has a wrong value, or cannot be parsed."""

    def __init__(self, source: str | Path, problem: str):
        self.source = str(source)
        self.problem = problem
        super().__init__(f"{source}: {problem}")

    def __reduce__(self):
        return (self.__class__, (self.source, self.problem))


class InputFileError(EuphoticError):
    """An input file cannot be used: missing variable, unknown unit, no dates, bad grid..."""

    def __init__(self, path: str | Path, problem: str):
        self.path = str(path)
        self.problem = problem
        super().__init__(f"{path}: {problem}")

    def __reduce__(self):  # rebuilt from (path, problem) when sent back from a dask worker
        return (self.__class__, (self.path, self.problem))


class DuplicatePeriodError(InputFileError):
    """Several files (or time steps) of one input give the same period."""


class VariableNotFoundError(InputFileError):
    """A file has no variable for the input (by standard name or the configured name)."""


class GridMismatchError(InputFileError):
    """A variable's grid cannot be brought onto the chlorophyll grid."""


class NoOverlapError(EuphoticError):
    """The inputs share no day with a valid estimate."""


class NoValidDataError(EuphoticError):
    """A run would produce no valid estimate at all (every input value missing or masked)."""


class NoRunError(EuphoticError):
    """A folder holds no committed euphotic run."""
