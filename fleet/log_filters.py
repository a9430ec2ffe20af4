"""Filters for the application's log."""

import logging


class RefusalsInOneLine(logging.Filter):
    """A refused request (403: a planner opening a technician's reading form) is the access rules at work,
    and a request the server cannot read (400: a form body sent as multipart with no boundary) is the
    sender's fault, not the server's: each is logged in one line, its traceback dropped, so the log of a
    busy plant still shows the faults."""

    def filter(self, record: logging.LogRecord) -> bool:
        if getattr(record, "status_code", None) in (400, 403):
            record.exc_info = None
            record.exc_text = None
        return True
