"""The one exception type that means "the user can fix this"."""

from __future__ import annotations

import difflib


class UserError(Exception):
    """A problem in the user's config, data or command line.

    The CLI prints ``str(err)`` as one message and exits with code 2; no traceback. The message
    names the problem and the fix.
    """


class InterruptedAfterWrite(KeyboardInterrupt):
    """Ctrl-C arrived while a complete output folder was being swapped in: the swap was finished
    first, so ``folder`` holds this run's complete output (churnlife.outputs)."""

    def __init__(self, folder: object) -> None:
        super().__init__(str(folder))
        self.folder = folder


def did_you_mean(word: str, choices: list[str] | tuple[str, ...]) -> str:
    """A ' Did you mean "x"?' suffix, or '' when nothing is close."""
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f' Did you mean "{close[0]}"?' if close else ""
