"""A blind A/B trial: each round hides A or B behind 'X', the listener
says which it is, and the score is tested against guessing (one-sided exact
binomial test). No sound here: a front end plays X and tells the trial how
long it played (:meth:`BlindTrial.listen_start`, :meth:`BlindTrial.listen_stop`).
"""
from __future__ import annotations

import csv
import io
import random
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Callable

from solderless.engine.errors import SolderlessError

MIN_LISTEN_S = 2.0
"""How long X must have played in a round before an answer is taken (our own
choice: long enough for a phrase of the synthetic source)."""


@dataclass
class TrialEntry:
    """One answered round of a blind trial."""
    time: str            # wall-clock time of the answer (ISO 8601, UTC)
    round: int           # 1-based
    hidden: str          # what X was: "A" or "B"
    answer: str          # what the listener said
    listened_s: float    # how long X played in this round

    @property
    def correct(self) -> bool:
        return self.hidden == self.answer


@dataclass
class BlindTrial:
    """A blind comparison: each round hides A or B behind 'X'; the listener
    says which it is, after hearing X for at least ``min_listen_s``. The
    score's p-value is the probability of doing at least as well by guessing
    (one-sided exact binomial test, ``scipy.stats.binomtest`` with p = 0.5).

    Listening time is counted between :meth:`listen_start` and
    :meth:`listen_stop` (``clock`` gives seconds; ``time.monotonic``)."""
    rounds: int = 10
    seed: int | None = None
    min_listen_s: float = MIN_LISTEN_S
    clock: Callable[[], float] = time.monotonic
    log: list[TrialEntry] = field(default_factory=list)
    hidden: str = ""

    def __post_init__(self):
        self.rng = random.SystemRandom() if self.seed is None else random.Random(self.seed)
        self.heard_s = 0.0
        self._since: float | None = None
        self.next_round()

    def next_round(self) -> str:
        self.hidden = self.rng.choice("AB")
        self.heard_s = 0.0
        self._since = None
        return self.hidden

    @property
    def answers(self) -> list[tuple[str, str]]:
        return [(e.hidden, e.answer) for e in self.log]

    @property
    def done(self) -> bool:
        return len(self.log) >= self.rounds

    def listen_start(self) -> None:
        """X started playing."""
        if self._since is None:
            self._since = self.clock()

    def listen_stop(self) -> None:
        """X stopped playing (A or B chosen instead, or the round ended)."""
        if self._since is not None:
            self.heard_s += max(0.0, self.clock() - self._since)
            self._since = None

    def listened(self) -> float:
        """Seconds X has played in this round so far."""
        extra = 0.0 if self._since is None else max(0.0, self.clock() - self._since)
        return self.heard_s + extra

    def answer(self, guess: str) -> bool:
        """Record an answer; refused (TrialError) before X was heard long
        enough. Returns whether it was right."""
        if self.done:
            raise TrialError("the trial is over")
        if guess not in ("A", "B"):
            raise TrialError(f"an answer is A or B, not {guess!r}")
        heard = self.listened()
        if heard < self.min_listen_s:
            raise TrialError(f"listen to X first: {heard:.1f} s of the "
                             f"{self.min_listen_s:g} s needed before an answer")
        self.listen_stop()
        e = TrialEntry(datetime.now(timezone.utc).isoformat(timespec="seconds"),
                       len(self.log) + 1, self.hidden, guess, round(heard, 2))
        self.log.append(e)
        if not self.done:
            self.next_round()
        return e.correct

    @property
    def score(self) -> int:
        return sum(e.correct for e in self.log)

    def p_value(self) -> float:
        from scipy.stats import binomtest
        n = len(self.log)
        if n == 0:
            return 1.0
        return float(binomtest(self.score, n, 0.5, alternative="greater").pvalue)

    def csv_text(self, a_name: str = "A", b_name: str = "B") -> str:
        """The log as CSV: one row per round, then the score and the
        probability of scoring at least as well by guessing."""
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(["time", "round", "hidden", "answer", "correct", "listened_s"])
        for e in self.log:
            w.writerow([e.time, e.round, e.hidden, e.answer, "yes" if e.correct else "no",
                        f"{e.listened_s:.2f}"])
        w.writerow([])
        w.writerow(["A", a_name])
        w.writerow(["B", b_name])
        w.writerow(["score", f"{self.score} of {len(self.log)}"])
        w.writerow(["p_value_one_sided_binomial", f"{self.p_value():.6g}"])
        return buf.getvalue()


class TrialError(SolderlessError):
    """A blind-trial step that cannot be taken now (no answer before X is heard)."""
