"""Helpers for tests that use QuantLib as their outside reference."""

from __future__ import annotations

from contextlib import contextmanager

import QuantLib as ql


@contextmanager
def evaluation_date(today: ql.Date):
    """QuantLib's global evaluation date set to ``today`` for the block, then restored."""
    settings = ql.Settings.instance()
    saved = settings.evaluationDate
    settings.evaluationDate = today
    try:
        yield
    finally:
        settings.evaluationDate = saved
