"""Shared by the tests: the tally of fuzzed and hostile inputs, printed at the end as
``fuzz: N inputs tried, C crashed, H hung, S changed state after an error``."""

from __future__ import annotations

from dataclasses import dataclass

import pytest


@dataclass
class FuzzTally:
    tried: int = 0
    crashed: int = 0
    hung: int = 0
    changed: int = 0
    errors: int = 0
    slowest_error: float = 0.0
    slowest_line: str = ""

    def add(self, outcome) -> None:
        self.tried += 1
        self.crashed += outcome.crashed
        self.hung += outcome.hung
        self.changed += outcome.changed_after_error
        if outcome.status == "error":
            self.errors += 1
            if outcome.seconds > self.slowest_error:
                self.slowest_error, self.slowest_line = outcome.seconds, outcome.line


_TALLY = FuzzTally()


@pytest.fixture(scope="session")
def fuzz_tally() -> FuzzTally:
    return _TALLY


def pytest_terminal_summary(terminalreporter):
    t = _TALLY
    if t.tried:
        terminalreporter.write_line(
            f"fuzz: {t.tried} inputs tried, {t.crashed} crashed, {t.hung} hung, {t.changed} "
            f"changed state after an error ({t.errors} ended in an error line; the slowest "
            f"error came after {t.slowest_error:.2f} s: {t.slowest_line[:60]!r})")
