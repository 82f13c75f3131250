"""Error types that the command line turns into one-line messages (exit 2)."""

from __future__ import annotations

from tracevet.text import inert


class TracevetError(Exception):
    """An expected failure, shown to the user as one line, never a traceback."""

    def one_line(self) -> str:
        """Return the message as a single line of inert text."""
        return inert(str(self)).replace("\n", " ")


class InputError(TracevetError):
    """Bad input: a file, a value or an option that tracevet refuses.

    Parameters
    ----------
    source : str
        What was being read: a file path, an option name or a setting key.
    problem : str
        What is wrong with it, phrased for the person at the terminal.
    """

    def __init__(self, source: str, problem: str):
        self.source = str(source)
        self.problem = str(problem)
        super().__init__(f"{self.source}: {self.problem}")


class SettingsError(InputError):
    """An invalid cleaning setting, profile or override."""
