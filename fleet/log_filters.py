"""Filters for the application's log."""

import logging


class RefusalsInOneLine(logging.Filter):
    """A refused request (403: a planner opening a technician's reading form) is the access rules at work,
    not a fault: it is logged in one line, its traceback dropped, so the log of a busy plant still shows
    the faults."""

    def filter(self, record: logging.LogRecord) -> bool:
        if getattr(record, "status_code", None) == 403:
            record.exc_info = None
            record.exc_text = None
        return True
