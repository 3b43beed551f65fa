"""Exceptions raised by stepmeter; the command line turns each into one clear line."""

__all__ = [
    "ClusterError",
    "ConfigError",
    "EnvironmentSourceError",
    "ExperimentBusyError",
    "StoreError",
    "TrialTimeout",
    "UnknownKindError",
    "UntrustedCodeError",
]


class ConfigError(ValueError):
    """An experiment file is malformed; the message names file, line, key path and what was expected."""


class UnknownKindError(LookupError):
    """A registry has no entry of that name; the message suggests the closest names."""


class EnvironmentSourceError(ValueError):
    """An environment cannot be built or is not usable by the tabular agents."""


class StoreError(RuntimeError):
    """A results folder is missing, unreadable or not a stepmeter store."""


class ClusterError(RuntimeError):
    """The cluster backend is not installed or its scheduler cannot be reached."""


class ExperimentBusyError(RuntimeError):
    """Another run holds the experiment's lock; the message names its process."""


class TrialTimeout(TimeoutError):
    """A trial ran past the per-trial wall-clock limit."""


class UntrustedCodeError(PermissionError):
    """A stored spec names code outside stepmeter and the user did not say they trust the results folder."""
