"""The API's request bodies: JSON the parser cannot read, bodies of another content type, and bodies Django
refuses, answered in JSON with `detail` (settings: DEFAULT_PARSER_CLASSES, EXCEPTION_HANDLER). Apart from
api.py, which rest_framework's views import through the settings."""

from __future__ import annotations

import codecs
import json

from django.conf import settings
from django.core.exceptions import RequestDataTooBig, TooManyFieldsSent, TooManyFilesSent
from rest_framework import status
from rest_framework.exceptions import ParseError, UnsupportedMediaType, ValidationError
from rest_framework.parsers import JSONParser
from rest_framework.response import Response
from rest_framework.utils import json as drf_json


def _each_key_once(pairs: list[tuple]) -> dict:
    """A JSON object whose keys are all different: one given twice (`{"capacitance_uf": 30, "capacitance_uf":
    3}`) is refused by name, as the query strings refuse a parameter given twice, never one value dropped."""
    seen: dict = {}
    for key, value in pairs:
        if key in seen:
            raise ValidationError(
                {key: [f"Given twice in the body ({json.dumps(seen[key])} and {json.dumps(value)}): send it once."]}
            )
        seen[key] = value
    return seen


class ReadableJSONParser(JSONParser):
    """DRF's JSON parser (the same decoding and strictness: NaN and Infinity refused), with JSON nested deeper
    than Python's parser goes (1000 arrays in about 2 KB) a 400 like any other JSON it cannot read, not a
    RecursionError, and a key given twice in one object a 400 naming it."""

    def parse(self, stream, media_type=None, parser_context=None):
        encoding = (parser_context or {}).get("encoding", settings.DEFAULT_CHARSET)
        try:
            decoded = codecs.getreader(encoding)(stream)
            constants = drf_json.strict_constant if self.strict else None
            return drf_json.load(decoded, parse_constant=constants, object_pairs_hook=_each_key_once)
        except RecursionError:
            raise ParseError("JSON parse error - nested too deeply: send a flat object of the fields.") from None
        except ValueError as error:
            raise ParseError(f"JSON parse error - {error}") from None


def api_exception_handler(exc, context):
    """DRF's answers, and a JSON one with `detail` for a body Django refuses before any parser (past
    DATA_UPLOAD_MAX_MEMORY_SIZE: 413; too many form fields or files: 400) where Django answers an HTML 400;
    a body that is not JSON (a form's, say) answers 415 saying what to send."""
    if isinstance(exc, UnsupportedMediaType):
        sent = context["request"].content_type or "no Content-Type"
        return Response(
            {"detail": f"The body was sent as {sent}: send a JSON object, with Content-Type: application/json."},
            status=status.HTTP_415_UNSUPPORTED_MEDIA_TYPE,
        )
    if isinstance(exc, RequestDataTooBig):
        limit = settings.DATA_UPLOAD_MAX_MEMORY_SIZE
        return Response(
            {"detail": f"The body is too large: at most {limit:,} bytes."},
            status=status.HTTP_413_REQUEST_ENTITY_TOO_LARGE,
        )
    if isinstance(exc, TooManyFieldsSent | TooManyFilesSent):
        return Response({"detail": f"The body cannot be read: {exc}"}, status=status.HTTP_400_BAD_REQUEST)
    from rest_framework.views import exception_handler  # here: rest_framework.views loads this module's parser

    return exception_handler(exc, context)
