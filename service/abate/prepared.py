"""Hot SELECTs whose SQL peewee writes once per kind of database; each later run only binds its values.

Peewee renders a query's SQL anew on every execution, which for a model of twenty columns costs more
than the database takes to answer a lookup by key. A PreparedSelect keeps the rendered SQL and the
fields it selects, and turns each row into a model instance as peewee's own cursor wrapper does, only
faster (RowBuilder); fetch_all() does the same for any other query of whole rows. On PostgreSQL a
lookup by a few values is also prepared on the server once per connection (ServerStatement).
"""

import itertools
import re

import peewee

from abate.db import database

# On PostgreSQL a SELECT of up to this many values is also prepared on the server, once per connection,
# which spares the server parsing and planning it on every run (a lookup by key costs half as much).
_PREPARED_ON_SERVER_UP_TO = 4
_statement_numbers = itertools.count(1)

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
            statement = ServerStatement(sql, len(params)) if len(values) <= _PREPARED_ON_SERVER_UP_TO else None
            # Two threads may both render the same SQL; either result serves.
            rendered = self._rendered[key] = (
                sql,
                params,
                positions,
                RowBuilder(self.model, query._returning),
                statement,
            )
        return rendered

    def rows(self, *values):
        """The model instances the SELECT yields for these values."""
        sql, params, positions, builder, statement = self._render(values)
        bound = list(params)
        for position, value in zip(positions, values, strict=True):
            bound[position] = value
        connection = database.connection()
        if statement is not None and hasattr(connection, "prepared_statements"):
            cursor = statement.execute(connection, bound)
        else:
            cursor = database.execute_sql(sql, bound)
        return builder.instances(cursor.fetchall())

    def first(self, *values):
        """The first instance the SELECT yields for these values, or None."""
        found = self.rows(*values)
        return found[0] if found else None


class ServerStatement:
    """One SELECT prepared by name on each PostgreSQL session that runs it (db.PreparingConnection).

    A statement the server will not prepare (say, a parameter whose type it cannot infer) is run as
    plain SQL from then on; preparing happens in a savepoint, so a refusal spoils no transaction.
    The statement is planned anew by the server when a migration changes a table it reads.
    """

    def __init__(self, sql, parameters):
        self.sql = sql
        self.name = f"abate_select_{next(_statement_numbers)}"
        numbers = itertools.count(1)
        # peewee writes %s per parameter and %% for a literal %, which the driver turns back into %.
        self._prepare = f"PREPARE {self.name} AS " + re.sub(
            r"%%|%s", lambda found: found.group() if found.group() == "%%" else f"${next(numbers)}", sql
        )
        self._execute = (
            f"EXECUTE {self.name}({', '.join(['%s'] * parameters)})" if parameters else f"EXECUTE {self.name}"
        )
        self.refused = False

    def execute(self, connection, bound):
        """Run the statement with bound values on connection (the database's current one); return the cursor."""
        if self.refused:
            return database.execute_sql(self.sql, bound)
        if self.name not in connection.prepared_statements:
            try:
                with database.atomic():
                    database.execute_sql(self._prepare)
            except peewee.ProgrammingError:
                self.refused = True
                return database.execute_sql(self.sql, bound)
            connection.prepared_statements.add(self.name)
        return database.execute_sql(self._execute, bound)


# Field kinds whose python_value returns a value of this type as it is (peewee's own adapt methods).
_PASSED_AS_THEY_ARE = (
    (peewee.IntegerField, int),
    (peewee.FloatField, float),
    (peewee.CharField, str),
    (peewee.TextField, str),
)


def _unchanged_types(field):
    """The types of value that field.python_value returns unchanged: None always, one more for plain kinds."""
    if type(field).python_value is not peewee.Field.python_value:
        return ()
    for kind, value_type in _PASSED_AS_THEY_ARE:
        if isinstance(field, kind) and type(field).adapt is kind.adapt:
            return (type(None), value_type)
    return (type(None),)


def _buildable(model, selected):
    """Whether selected are plain fields of model (converted by peewee as usual) and model has no __init__."""
    return model.__init__ is peewee.Model.__init__ and all(
        isinstance(field, peewee.Field) and field.model is model and field._coerce for field in selected
    )


class RowBuilder:
    """Turns rows of the selected fields into model instances, as peewee's cursor wrapper does, minus its setattr.

    peewee builds an instance with one descriptor call per column; for rows straight from the database
    (foreign keys as plain ids) that only stores each converted value, which this does in one step.
    """

    def __init__(self, model, selected):
        if not _buildable(model, selected):
            raise ValueError("rows are built from whole rows of their model, selected field by field and converted")
        self.model = model
        self.columns = [(field.name, _unchanged_types(field), field.python_value) for field in selected]

    def instances(self, rows):
        """A model instance for each row, clean (no field marked dirty)."""
        model, columns = self.model, self.columns
        found = []
        for row in rows:
            instance = object.__new__(model)
            instance.__data__ = {
                name: value if type(value) in unchanged else convert(value)
                for (name, unchanged, convert), value in zip(columns, row, strict=True)
            }
            instance._dirty = set()
            instance.__rel__ = {}
            found.append(instance)
        return found


def _whole_rows_of_model(query):
    return (
        isinstance(query, peewee.ModelSelect)
        and query._row_type in (None, peewee.ROW.MODEL)
        and not query._joins
        and not getattr(query, "_load_tree", None)
        and len(query._from_list) == 1
        and query._from_list[0] is query.model
        and _buildable(query.model, query._returning)
    )


def fetch_all(query):
    """list(query); a plain SELECT of whole rows of one model has its instances built by a RowBuilder."""
    if not _whole_rows_of_model(query):
        return list(query)
    sql, params = query.sql()
    return RowBuilder(query.model, query._returning).instances(query._database.execute_sql(sql, params).fetchall())
