"""Schema dumps by a plan made once per schema: marshmallow's own output, without its per-field indirections.

marshmallow fetches every value through three accessor calls and then calls the field's _serialize, even
for a str going out as that str; on a page of fifty modes this costs more than reading them. A plan looks
each field up directly and leaves out only the calls that return a value unchanged (a str for a String,
an int for an Integer, a float for a Float, anything for a plain Field or Boolean, None for these and
Nested or List). Every other value, field kind or schema hook goes through marshmallow itself.
"""

import marshmallow as ma
from marshmallow import fields
from marshmallow.decorators import POST_DUMP, PRE_DUMP
from marshmallow.utils import get_value, missing

_NONE = type(None)


class PlannedDump:
    """Mixin before ma.Schema: dump() follows the schema's plan; the result equals Schema.dump's."""

    def dump(self, obj, *, many=None):
        """Serialize obj (a collection of them with many) as marshmallow would."""
        return _plan_of(self)(obj, self.many if many is None else bool(many))


def _plan_of(schema):
    """The schema instance's plan, made on first use (two threads may both make it; either serves)."""
    plan = schema.__dict__.get("_dump_plan")
    if plan is None:
        plan = schema._dump_plan = dump_plan(schema)
    return plan


def _number_type(field):
    plain = type(field)._serialize is fields.Number._serialize and type(field)._format_num is fields.Number._format_num
    return field.num_type if plain and not field.as_string and field.num_type in (int, float) else None


def _value_converter(field):
    """(kept, convert) for a field: a value whose type is in kept is its own result; others need convert."""
    method = type(field)._serialize
    if method is fields.Field._serialize:
        return None, None
    if method is fields.String._serialize:
        return (str, _NONE), field._serialize
    number_type = _number_type(field)
    if number_type is not None:
        return (number_type, _NONE), field._serialize
    if method is fields.Nested._serialize:
        nested = field.schema
        many = bool(nested.many or field.many)
        # Looked up per value, not now: a schema may nest itself.
        return (_NONE,), lambda value, attr, obj: _plan_of(nested)(value, many)
    if method is fields.List._serialize:
        inner_kept, inner_convert = _value_converter(field.inner)
        if inner_convert is None:
            return (_NONE,), lambda value, attr, obj: list(value)
        return (_NONE,), lambda value, attr, obj: [
            each if type(each) in inner_kept else inner_convert(each, attr, obj) for each in value
        ]
    return (), field._serialize


def dump_plan(schema):
    """A function (obj, many) -> schema's dump of obj; marshmallow's own dump where a hook or accessor differs."""
    if schema._hooks[PRE_DUMP] or schema._hooks[POST_DUMP] or type(schema).get_attribute is not ma.Schema.get_attribute:
        dump = ma.Schema.dump if isinstance(schema, PlannedDump) else type(schema).dump
        return lambda obj, many: dump(schema, obj, many=many)
    steps = []
    for attr_name, field in schema.dump_fields.items():
        key = field.data_key if field.data_key is not None else attr_name
        source = field.attribute if field.attribute is not None else attr_name
        # Method and Function fields compute their value: marshmallow takes the whole step.
        computed = not field._CHECK_ATTRIBUTE
        kept, convert = (None, None) if computed else _value_converter(field)
        # A dotted name is a path for marshmallow's get_value, never one dict key.
        steps.append((key, attr_name, source, "." not in source, kept, convert, computed, field))
    dict_class, accessor = schema.dict_class, schema.get_attribute

    def dump_one(obj):
        result = dict_class()
        is_dict = type(obj) is dict
        for key, attr_name, source, plain, kept, convert, computed, field in steps:
            if computed:
                value = field.serialize(attr_name, obj, accessor=accessor)
                if value is not missing:
                    result[key] = value
                continue
            if is_dict and plain and source in obj:
                value = obj[source]
            else:
                value = get_value(obj, source, missing)
                if value is missing:
                    default = field.dump_default
                    value = default() if callable(default) else default
                    if value is missing:
                        continue
            result[key] = value if convert is None or type(value) in kept else convert(value, attr_name, obj)
        return result

    def dump(obj, many):
        if many and obj is not None:
            return [dump_one(each) for each in obj]
        return dump_one(obj)

    return dump
