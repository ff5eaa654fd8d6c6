"""The night jobs' own errors, answered through the problem table (service/problem_table.py)."""

from __future__ import annotations


class JobNotFinishedError(Exception):
    """A job's result was asked for before the job succeeded (409)."""

    def __init__(self, status: str) -> None:
        super().__init__(status)
        self.status = status


class StorageFullError(Exception):
    """The disk (or quota) holding the job store is full (507)."""
