"""One error family for user mistakes and unrunnable input.

Every message names where the problem is (file, line, part) and says how to
fix it. The command line prints these without a traceback; anything else that
escapes is a bug in Solderless, not in the user's design.
"""
from __future__ import annotations

import re

#: Longest run of non-space characters an error message repeats whole: a
#: longer one (a 200 KB token, a binary file's line) is cut to its start.
LONGEST_ECHO = 120
_LONG = re.compile(r"\S{%d,}" % (LONGEST_ECHO + 1))


def cut_long(text: str) -> str:
    """``text`` with every run of more than LONGEST_ECHO non-space characters
    cut to its first 60 and a count of the rest."""
    return _LONG.sub(lambda m: f"{m.group(0)[:60]}...[{len(m.group(0)) - 60} more "
                               "characters]", str(text))


class SolderlessError(Exception):
    """A user mistake or an input Solderless cannot run.

    Parameters
    ----------
    message : what is wrong, in the user's terms.
    file, line : where it was written (either may be None).
    part : the part, stage or card concerned (may be None).
    hint : how to fix it (may be None).
    """

    def __init__(self, message: str, *, file: str | None = None,
                 line: int | None = None, part: str | None = None,
                 hint: str | None = None):
        self.message = message
        self.file = file
        self.line = line
        self.part = part
        self.hint = hint
        super().__init__(str(self))

    def __str__(self) -> str:
        where = ""
        if self.file:
            where = str(self.file)
            if self.line is not None:
                where += f":{self.line}"
            where += ": "
        elif self.line is not None:
            where = f"line {self.line}: "
        who = f"part '{self.part}': " if self.part else ""
        text = f"{where}{who}{self.message}"
        if self.hint:
            text += f" ({self.hint})"
        return cut_long(" ".join(text.split("\n")))


class DesignError(SolderlessError):
    """A design file, stage or netlist that is malformed or inconsistent."""


class ValueFormatError(DesignError):
    """Text where a component value belongs that cannot be read as one."""


class SolveError(SolderlessError):
    """The circuit cannot be solved (singular network, no operating point)."""


class AudioError(SolderlessError):
    """Audio device, PortAudio library or stream problems."""
