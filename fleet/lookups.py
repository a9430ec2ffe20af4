"""`field__any_of=values`: a filter on a long list of values sent as one parameter.

`field__in` sends one placeholder per value; at tens of thousands of values (the tags
or keys of an import file) building and splitting that query costs more than running it.
Here the list travels as one parameter: on PostgreSQL one text split by the server
(`= ANY(string_to_array(...))`, or an array when a value holds the separator), on SQLite
one JSON text (`IN (SELECT value FROM json_each(...))`). Pass a numpy array or a pandas
Index rather than a list: Django walks a list value by value before the lookup sees it.
"""

from __future__ import annotations

import json

from django.db.models import Field, ForeignObject, Lookup

SEPARATOR = "\x1f"  # ASCII unit separator


@ForeignObject.register_lookup  # a foreign key keeps lookups of its own: register there too
@Field.register_lookup
class AnyOf(Lookup):
    lookup_name = "any_of"
    prepare_rhs = False

    def as_sql(self, compiler, connection):
        lhs, lhs_params = self.process_lhs(compiler, connection)
        values = self.rhs.tolist() if hasattr(self.rhs, "tolist") else list(self.rhs)
        if connection.vendor != "postgresql":
            return f"{lhs} IN (SELECT value FROM json_each(%s))", [*lhs_params, json.dumps(values)]
        if values and all(isinstance(v, str) for v in values):
            joined = SEPARATOR.join(values)
            if joined.count(SEPARATOR) == len(values) - 1:
                return f"{lhs} = ANY(string_to_array(%s, %s))", [*lhs_params, joined, SEPARATOR]
        if values and all(isinstance(v, int) and not isinstance(v, bool) for v in values):
            return f"{lhs} = ANY(string_to_array(%s, ',')::bigint[])", [*lhs_params, ",".join(map(str, values))]
        return f"{lhs} = ANY(%s)", [*lhs_params, values]
