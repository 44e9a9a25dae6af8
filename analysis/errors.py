"""Outrigger's own exception types.

Every message says what is wrong, the value found, and what to do. The server
maps these to HTTP statuses in one handler; the CLI prints them and exits 2.
"""

from __future__ import annotations


class OutriggerError(Exception):
    """Base class of every error Outrigger raises on purpose (bad input, missing run)."""

    #: HTTP status the server answers with.
    status = 400


class ProfileError(OutriggerError):
    """The robot profile is missing a field or has a bad value."""


class ThresholdsError(OutriggerError):
    """A thresholds or limits file has an unknown key or a bad value."""


class ChannelMapError(OutriggerError):
    """The channel map is malformed, names an absent column, or gives a bad unit."""


class IngestError(OutriggerError):
    """A log file cannot be ingested (format, time column, too many bad lines)."""


class RunNotFoundError(OutriggerError):
    """No run with that id in the archive."""

    status = 404


class ArchiveError(OutriggerError):
    """The archive folder or catalog is unusable."""

    status = 500


class CompareError(OutriggerError):
    """Two runs cannot be compared as asked (e.g. not the same course)."""


class AlreadyStoredError(OutriggerError):
    """The same source files were stored as another run meanwhile (found when committing).

    ``run_id`` is that run's id; the ingest reports it instead of storing a copy.
    """

    status = 409

    def __init__(self, run_id: str) -> None:
        super().__init__(f"These files are already stored as run {run_id}; nothing new stored.")
        self.run_id = run_id
