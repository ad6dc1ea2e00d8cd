"""A planned dump gives exactly marshmallow's Schema.dump output, field kind by field kind."""

import datetime
import json

import marshmallow as ma
import pytest

from abate.api.common import UTCDateTime, list_schema
from abate.api.dumping import PlannedDump, dump_plan


class Inner(ma.Schema):
    """A nested schema without the mixin."""

    code = ma.fields.String()
    weight = ma.fields.Float(allow_none=True)


class Everything(PlannedDump, ma.Schema):
    """One field of each kind the plan treats apart, and some it leaves to marshmallow."""

    text = ma.fields.String()
    number = ma.fields.Integer()
    ratio = ma.fields.Float()
    flag = ma.fields.Boolean()
    raw = ma.fields.Raw()
    when = UTCDateTime(allow_none=True)
    inner = ma.fields.Nested(Inner, allow_none=True)
    inners = ma.fields.List(ma.fields.Nested(Inner))
    words = ma.fields.List(ma.fields.String())
    anything = ma.fields.List(ma.fields.Raw())
    counted = ma.fields.Integer(as_string=True)
    renamed = ma.fields.String(data_key="shownAs")
    sourced = ma.fields.String(attribute="elsewhere")
    dotted = ma.fields.String(attribute="inner.code")
    defaulted = ma.fields.String(dump_default="none given")
    computed = ma.fields.Method("shout")
    secret = ma.fields.String(load_only=True)

    def shout(self, obj):
        """A Method field: marshmallow computes it."""
        return str(obj.get("text", "")).upper()


class Hooked(PlannedDump, ma.Schema):
    """A schema with a post_dump hook, which the plan hands to marshmallow."""

    text = ma.fields.String()

    @ma.post_dump
    def stamp(self, data, **kwargs):
        """Mark the output."""
        return {**data, "hooked": True}


MOMENT = datetime.datetime(2026, 3, 29, 1, 30, 15, 250000)
OBJECTS = [
    {
        "text": "plain",
        "number": 7,
        "ratio": 0.25,
        "flag": True,
        "raw": {"kept": [1, 2]},
        "when": MOMENT,
        "inner": {"code": "A", "weight": 1.5},
        "inners": [{"code": "B", "weight": None}, {"code": 3, "weight": 2}],
        "words": ["x", 5, None],
        "anything": [1, "two"],
        "counted": 12,
        "renamed": "r",
        "elsewhere": "from elsewhere",
        "secret": "never shown",
    },
    # Values marshmallow converts: an int for a String or Float, a bool or float for an Integer, bytes.
    {"text": 12, "number": True, "ratio": 3, "flag": 0, "renamed": b"bytes", "number_extra": 1, "counted": 4.9},
    {"number": 2.7, "text": None, "when": None, "inner": None, "inners": [], "words": None},
    # Missing keys: left out, or given the dump_default.
    {},
]


@pytest.mark.parametrize("obj", OBJECTS)
def test_a_planned_dump_equals_marshmallows(obj):
    schema = Everything()
    planned = schema.dump(obj)
    assert planned == ma.Schema.dump(schema, obj)
    assert json.dumps(planned) == json.dumps(ma.Schema.dump(schema, obj))


def test_a_planned_dump_of_many_and_of_a_list_envelope_equals_marshmallows():
    schema = Everything()
    assert schema.dump(OBJECTS, many=True) == ma.Schema.dump(schema, OBJECTS, many=True)
    envelope = list_schema(Everything)()
    page = {"items": OBJECTS, "next": None}
    assert envelope.dump(page) == ma.Schema.dump(envelope, page)


def test_a_schema_with_a_dump_hook_is_dumped_by_marshmallow():
    assert Hooked().dump({"text": "t"}) == {"text": "t", "hooked": True}
    assert dump_plan(Inner())({"code": 1, "weight": 2}, False) == Inner().dump({"code": 1, "weight": 2})


class Tree(PlannedDump, ma.Schema):
    """A schema that nests itself."""

    name = ma.fields.String()
    children = ma.fields.List(ma.fields.Nested(lambda: Tree()))


def test_a_schema_that_nests_itself_is_planned_lazily():
    tree = {"name": "root", "children": [{"name": "leaf", "children": []}, {"name": 7}]}
    assert Tree().dump(tree) == ma.Schema.dump(Tree(), tree)
