"""The error hierarchy of luxsweep's orchestration layer.

Every error luxsweep defines derives from one root, :class:`LuxsweepError`
(defined in :mod:`kernels.errors`, so that the kernels' :class:`InputError`
shares it, and re-exported here), and also inherits the matching builtin, so
callers may catch either. The command line maps :class:`UserInputError` (and the
kernels' :class:`kernels.errors.InputError`) to exit status 2 with one message,
and everything else to exit status 1. Exceptions chain with ``from exc``
(the rule is in :mod:`kernels.errors`).
"""

from __future__ import annotations

from luxsweep.kernels.errors import InputError, LuxsweepError

__all__ = [
    "CacheIntegrityError",
    "CacheLocationError",
    "InputError",
    "InputMismatchError",
    "LuxsweepError",
    "PreflightError",
    "ResultsStoreError",
    "SchedulerError",
    "StudyFileError",
    "UserInputError",
    "VariantFailedError",
]


class UserInputError(LuxsweepError, ValueError):
    """Bad input that the user can fix (study file, arguments, paths)."""


class StudyFileError(UserInputError):
    """The study file is invalid: names the file, key path, line and a fix."""


class ResultsStoreError(UserInputError):
    """A results store cannot be used (belongs to another study, damaged)."""


class CacheIntegrityError(LuxsweepError, OSError):
    """A cache entry is incomplete or fails its checksum (treated as a miss)."""


class VariantFailedError(LuxsweepError, RuntimeError):
    """One or more variants failed; the message names their ids."""


class SchedulerError(UserInputError):
    """The Dask scheduler given cannot be used: a missing or malformed scheduler
    file, an address that is not one, no answer within the time-out, or missing
    TLS files (a plain sentence; exit status 2 on the command line)."""


class InputMismatchError(UserInputError):
    """A worker reads an input whose bytes differ from the client's (another file at
    the same path: another mount, a stale copy) or cannot read it at all; names
    the file and the worker. Stops the run: never a silent wrong result."""


class PreflightError(UserInputError):
    """The pre-flight check found workers that cannot do their part (inputs,
    cache or store folder, versions); one message lists what fails where."""


class CacheLocationError(UserInputError):
    """The coefficient cache location cannot be used: an fsspec URL that no
    installed backend serves, or that cannot be created or written (exit 2)."""
