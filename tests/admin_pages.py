"""Posting the register keeper's forms as a browser does: every box of a page as drawn (`as_drawn`), or a
hand-made post with the record's values as the page would have shown them (`as_shown`)."""

import json
from html.parser import HTMLParser

from fleet.services.shown_values import SHOWN_VALUES, stored_values


class _Boxes(HTMLParser):
    """The named boxes of a page with the values a browser would send for them as drawn."""

    def __init__(self):
        super().__init__()
        self.values: dict[str, list[str]] = {}
        self._select = self._textarea = None

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        name = attrs.get("name")
        if tag == "input" and name and attrs.get("type") not in {"submit", "button", "file"}:
            ticked = attrs.get("type") in {"checkbox", "radio"}
            if not ticked or "checked" in attrs:
                self.values.setdefault(name, []).append(attrs.get("value", "on" if ticked else ""))
        elif tag == "select" and name:
            self._select = name
            self.values.setdefault(name, [])
        elif tag == "option" and self._select and "selected" in attrs:
            self.values[self._select].append(attrs.get("value", ""))
        elif tag == "textarea" and name:
            self._textarea = name
            self.values[name] = [""]

    def handle_endtag(self, tag):
        if tag == "select":
            self._select = None
        elif tag == "textarea":
            self._textarea = None

    def handle_data(self, data):
        if self._textarea:
            self.values[self._textarea][0] += data


def as_drawn(response) -> dict[str, list[str]]:
    """What the page's forms send unchanged (an admin change form with its inlines and hidden boxes)."""
    assert response.status_code == 200, response.status_code
    parser = _Boxes()
    parser.feed(response.content.decode())
    parser.values.pop("csrfmiddlewaretoken", None)
    return parser.values


def as_shown(record) -> dict[str, str]:
    """The hidden box of `record`'s change form as the page draws it now: its stored values."""
    names = [field.name for field in (*record._meta.concrete_fields, *record._meta.many_to_many)]
    return {SHOWN_VALUES: json.dumps(stored_values(record, names))}
