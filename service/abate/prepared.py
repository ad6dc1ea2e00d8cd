"""Hot SELECTs whose SQL peewee writes once per kind of database; each later run only binds its values.

Peewee renders a query's SQL anew on every execution, which for a model of twenty columns costs more
than the database takes to answer a lookup by key. A PreparedSelect keeps the rendered SQL and the
fields it selects, and turns each row into a model instance as peewee's own cursor wrapper does.
"""

from abate.db import database

# Stand-ins for the values, recognisable among the rendered parameters; no real id or text is like them.
_INTEGER_MARKER = -7_340_033_000_000_000
_TEXT_MARKER = "\x00prepared value {}\x00"


def _marker(value, position):
    if isinstance(value, bool) or not isinstance(value, (int, str)):
        raise TypeError(f"a prepared SELECT binds integers and text, not {type(value).__name__}")
    return _INTEGER_MARKER - position if isinstance(value, int) else _TEXT_MARKER.format(position)


class PreparedSelect:
    """SELECTs of model built by build(*values), rendered once per database kind and number of values.

    build must return model.select() narrowed by where, order or limit, and pass each value to the
    query unchanged as one parameter (ids and text compared with = or IN); both are checked when the
    SQL is rendered.
    """

    def __init__(self, model, build):
        self.model = model
        self.build = build
        self._rendered = {}

    def _render(self, values):
        # The SQL differs between databases in its parameter style; its values differ only in kind and number.
        key = (type(database.obj), tuple(type(value) for value in values))
        rendered = self._rendered.get(key)
        if rendered is None:
            markers = [_marker(value, position) for position, value in enumerate(values)]
            query = self.build(*markers)
            sql, params = query.sql()
            positions = [index for marker in markers for index, param in enumerate(params) if param == marker]
            if len(positions) != len(markers):
                raise ValueError("each value of a prepared SELECT must reach its SQL as exactly one parameter")
            selected = query._returning
            if any(getattr(field, "model", None) is not self.model for field in selected):
                raise ValueError("a prepared SELECT selects whole rows of its model, field by field")
            # Two threads may both render the same SQL; either result serves.
            rendered = self._rendered[key] = (sql, params, positions, [field.name for field in selected])
        return rendered

    def rows(self, *values):
        """The model instances the SELECT yields for these values."""
        sql, params, positions, names = self._render(values)
        bound = list(params)
        for position, value in zip(positions, values, strict=True):
            bound[position] = value
        fields = self.model._meta.fields
        found = []
        for row in database.execute_sql(sql, bound).fetchall():
            instance = self.model(
                __no_default__=1,
                **{name: fields[name].python_value(value) for name, value in zip(names, row, strict=True)},
            )
            instance._dirty.clear()
            found.append(instance)
        return found

    def first(self, *values):
        """The first instance the SELECT yields for these values, or None."""
        found = self.rows(*values)
        return found[0] if found else None
