"""Terminal progress: drawn only on a terminal, and never mixed into a log line.

Checks of the display contract (common practice for command-line tools: a
progress line is redrawn with a carriage return and is wiped before other
output, so that log lines start at column 0).
"""

from __future__ import annotations

import io
import logging

from corridor import progress


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_log_line_wipes_the_progress_line(monkeypatch):
    monkeypatch.delenv("CORRIDOR_PROGRESS", raising=False)
    monkeypatch.setattr(progress, "_quiet", [False])  # a CLI test may have run with --quiet
    term = Terminal()
    handler = progress.ConsoleHandler(term)
    handler.setFormatter(logging.Formatter("%(message)s"))
    logger = logging.getLogger("corridor.test_progress")
    logger.addHandler(handler)
    logger.propagate = False
    try:
        with progress.bar("compute", total=4, stream=term) as bar:
            bar.update()
            drawn = term.getvalue()
            assert "compute" in drawn and "1/4" in drawn
            logger.warning("partition 1/4 done")
            after = term.getvalue()[len(drawn):]
            # the bar is wiped (carriage return, blanks, carriage return) before the message
            assert after.startswith("\r") and after.index("partition") > 1
            assert after[:after.index("partition")].strip(" \r") == ""
            logger.warning("second line")  # nothing drawn since: no wipe
            assert term.getvalue().endswith("partition 1/4 done\nsecond line\n")
    finally:
        logger.removeHandler(handler)


def test_nothing_drawn_off_a_terminal():
    plain = io.StringIO()
    with progress.bar("compute", total=2, stream=plain) as bar:
        bar.update()
        bar.update()
    progress.stage("write", 5, 5, stream=plain)
    assert plain.getvalue() == ""
