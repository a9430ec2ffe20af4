"""Filters for the application's log."""

import logging

from django.db import InterfaceError, OperationalError


class RefusalsInOneLine(logging.Filter):
    """A refused request (403: a planner opening a technician's reading form) is the access rules at work,
    and a request the server cannot read (400: a form body sent as multipart with no boundary) is the
    sender's fault, not the server's: each is logged in one line, its traceback dropped, so the log of a
    busy plant still shows the faults. So is a request the database could not answer (it is away or busy),
    with the driver's words."""

    def filter(self, record: logging.LogRecord) -> bool:
        if getattr(record, "status_code", None) in (400, 403):
            record.exc_info = None
            record.exc_text = None
        elif record.exc_info and isinstance(record.exc_info[1], (OperationalError, InterfaceError)):
            # The database away or busy: the request is answered 503 (`faults.server_error`), and one line with
            # the driver's words tells the operator as much as a traceback a request (an operator's walk counted
            # 584 lines for six requests while the database was down).
            record.msg = f"{record.getMessage()}: database unavailable, answered 503: {record.exc_info[1]}"
            record.args = ()
            record.exc_info = None
            record.exc_text = None
        return True
