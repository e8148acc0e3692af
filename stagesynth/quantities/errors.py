"""User-facing errors: one clear message, no traceback, a defined exit code."""

from __future__ import annotations


class StageError(Exception):
    """Bad input from the user (spec, design or device file): exit code 2.

    The message names the file, the key path, what is wrong and what would be
    accepted, so the user can fix it without reading code.
    """

    exit_code = 2

    def __init__(
        self,
        message: str,
        *,
        file: str | None = None,
        key: str | None = None,
        accepted: str | None = None,
    ) -> None:
        self.message = message
        self.file = file
        self.key = key
        self.accepted = accepted
        super().__init__(str(self))

    def __str__(self) -> str:
        where = ": ".join(part for part in (self.file, self.key) if part)
        text = f"{where}: {self.message}" if where else self.message
        if self.accepted:
            text += f" (accepted: {self.accepted})"
        return text

    def located(self, *, file: str | None = None, key: str | None = None) -> StageError:
        """A copy with the file and/or key filled in where they were unknown."""
        return StageError(
            self.message,
            file=self.file or file,
            key=self.key or key,
            accepted=self.accepted,
        )


class ConvergenceError(Exception):
    """The DC operating point could not be found; reported, never hidden."""


class OutputExistsError(StageError):
    """An output file exists that stagesynth did not write; refuse to overwrite it."""


class NoDesignError(StageError):
    """No candidate of a circuit family survives a requirement: exit 1 (the spec is valid,
    but unreachable), one line naming the requirement and the family."""

    exit_code = 1
