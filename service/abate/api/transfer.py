"""/v1/studies/{id}/import and /v1/studies/{id}/export: worksheets in (CSV, XLSX, JSON) and out."""

import io
import json

import marshmallow as ma
from flask import Response, request
from flask.views import MethodView
from flask_smorest import Blueprint
from werkzeug.http import parse_options_header

from abate.api import ProblemSchema
from abate.api.auth import current_actor
from abate.domain import exporter, importer
from abate.errors import PROBLEM_MEDIA_TYPE, ValidationFailed, field_error

blp = Blueprint("transfer", __name__, url_prefix="/v1", description="Worksheet import and export")

UPLOAD_FIELD = "file"
XLSX_MEDIA_TYPE = exporter.MEDIA_TYPES["xlsx"]


class JsonObjectText(ma.fields.String):
    """A query parameter holding a JSON object as text, e.g. mapping={"severity": "S"}."""

    def _deserialize(self, value, attr, data, **kwargs):
        text = super()._deserialize(value, attr, data, **kwargs)
        try:
            parsed = json.loads(text)
        except ValueError as error:
            raise ma.ValidationError('must be a JSON object, e.g. {"severity": "S"}') from error
        if not isinstance(parsed, dict):
            raise ma.ValidationError('must be a JSON object, e.g. {"severity": "S"}')
        return parsed


class ImportArgsSchema(ma.Schema):
    """Options of a worksheet import."""

    dry_run = ma.fields.Boolean(
        load_default=False, metadata={"description": "true: check every row and report, write nothing"}
    )
    sheet = ma.fields.String(
        validate=ma.validate.Length(min=1, max=100),
        metadata={"description": "XLSX: the sheet to read (default: the first)"},
    )
    mapping = JsonObjectText(
        metadata={
            "description": "JSON object {our field: the sheet's column title}, e.g. "
            '{"failure_mode": "Description", "severity": "S"}. Fields: ' + ", ".join(importer.FIELDS)
        }
    )


class RowProblemSchema(ma.Schema):
    """One problem of an uploaded file."""

    location = ma.fields.String(metadata={"description": "file"})
    row = ma.fields.Integer(
        allow_none=True,
        metadata={
            "description": "Row as a spreadsheet shows it (a plain sheet's header is row 1); JSON: mode position"
        },
    )
    column = ma.fields.String(allow_none=True, metadata={"description": "The column's title in the file"})
    field = ma.fields.String(metadata={"description": "Our field name"})
    message = ma.fields.String()


class WorksheetProblemSchema(ProblemSchema):
    """Problem details of a refused import: every problem of the file by row and column."""

    errors = ma.fields.List(ma.fields.Nested(RowProblemSchema))


class ImportReportSchema(ma.Schema):
    """What an import found and (unless a dry run) wrote."""

    file = ma.fields.String(metadata={"description": "The uploaded file's name, without any folders"})
    format = ma.fields.String(metadata={"description": "csv, xlsx or json, told from the content"})
    sheet = ma.fields.String(allow_none=True)
    header_row = ma.fields.Integer(allow_none=True)
    columns = ma.fields.Dict(
        keys=ma.fields.String(), values=ma.fields.String(), metadata={"description": "Our field: their column title"}
    )
    ignored_columns = ma.fields.List(ma.fields.String(), metadata={"description": "Titles not imported (e.g. RPN)"})
    rows = ma.fields.Integer(metadata={"description": "Data rows read (blank rows skipped)"})
    modes = ma.fields.Integer()
    actions = ma.fields.Integer()
    dry_run = ma.fields.Boolean()
    imported = ma.fields.Boolean()
    mode_ids = ma.fields.List(ma.fields.Integer(), metadata={"description": "The created modes, in file order"})
    problems = ma.fields.List(ma.fields.Nested(RowProblemSchema))
    caution = ma.fields.String()


class ExportArgsSchema(ma.Schema):
    """The export's file format."""

    format = ma.fields.String(
        load_default="xlsx",
        validate=ma.validate.OneOf(tuple(exporter.MEDIA_TYPES)),
        metadata={"description": "xlsx (default), csv or json (json re-imports)"},
    )


IMPORT_BODY = {
    "required": True,
    "content": {
        "multipart/form-data": {
            "schema": {
                "type": "object",
                "properties": {UPLOAD_FIELD: {"type": "string", "contentMediaType": "application/octet-stream"}},
                "required": [UPLOAD_FIELD],
            }
        },
        "text/csv": {"schema": {"type": "string"}},
        XLSX_MEDIA_TYPE: {"schema": {"type": "string", "contentMediaType": XLSX_MEDIA_TYPE}},
        "application/json": {"schema": {"type": "object", "description": "A JSON export of a study"}},
    },
}


EXPORT_RESPONSE = {
    "description": "Every mode with initial, current and projected ratings and RPN, its actions, the risk summary "
    "and the caution; sent as an attachment (Content-Disposition) named after the study",
    "content": {
        XLSX_MEDIA_TYPE: {"schema": {"type": "string", "contentMediaType": XLSX_MEDIA_TYPE}},
        "text/csv": {"schema": {"type": "string"}},
        "application/json": {"schema": {"type": "object", "description": "Re-imports as it is"}},
    },
}


def _upload():
    """(seekable binary stream, file name) of the multipart field `file`, or of the raw body."""
    if request.mimetype == "multipart/form-data":
        upload = request.files.get(UPLOAD_FIELD)
        if upload is None:
            raise ValidationFailed(
                "no file uploaded", errors=[field_error(UPLOAD_FIELD, "send the worksheet in this field", "files")]
            )
        return upload.stream, upload.filename
    # A raw body is bounded by MAX_BODY_BYTES; its name, if any, comes from Content-Disposition.
    _, options = parse_options_header(request.headers.get("Content-Disposition", ""))
    return io.BytesIO(request.get_data()), options.get("filename")


@blp.route("/studies/<int:study_id>/import")
class StudyImport(MethodView):
    """Importing a worksheet into a study."""

    @blp.arguments(ImportArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(201, ImportReportSchema, description="Imported: every row became a mode (and its action)")
    @blp.alt_response(200, schema=ImportReportSchema, description="Dry run: the report, nothing written")
    @blp.alt_response(
        422,
        schema=WorksheetProblemSchema,
        content_type=PROBLEM_MEDIA_TYPE,
        description="Unreadable file, or rows with problems: `errors` lists each by row and column; nothing written",
    )
    @blp.alt_response(404, description="No study with this id")
    @blp.alt_response(409, description="The study is archived")
    @blp.doc(requestBody=IMPORT_BODY)
    def post(self, args, study_id):
        """Import a CSV, an XLSX workbook or a JSON export: every row checked first, then all rows or none."""
        stream, file_name = _upload()
        report = importer.import_worksheet(
            study_id,
            stream,
            file_name,
            actor=current_actor(),
            mapping=args.get("mapping"),
            sheet=args.get("sheet"),
            dry_run=args["dry_run"],
        )
        if args["dry_run"]:
            return report, 200
        return report, 201, {"Location": f"/v1/studies/{study_id}/modes"}


@blp.route("/studies/<int:study_id>/export")
class StudyExport(MethodView):
    """Exporting a study as a file."""

    @blp.arguments(ExportArgsSchema, location="query", unknown=ma.RAISE)
    @blp.doc(responses={"200": EXPORT_RESPONSE})
    @blp.alt_response(404, description="No study with this id")
    def get(self, args, study_id):
        """Download the study as an XLSX workbook, a CSV file or a JSON export that re-imports."""
        content, media_type, file_name = exporter.export_study(study_id, args["format"])
        return Response(
            content, content_type=media_type, headers={"Content-Disposition": f'attachment; filename="{file_name}"'}
        )
