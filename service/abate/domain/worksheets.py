"""Reading uploaded worksheets: CSV, XLSX and JSON exports as rows of cell values, and cells as typed values."""

import codecs
import csv
import datetime
import json
import re
import zipfile
import zlib
from dataclasses import dataclass
from pathlib import PureWindowsPath

import marshmallow as ma
import openpyxl
from openpyxl.utils import range_boundaries
from openpyxl.utils.datetime import from_excel

from abate.errors import ValidationFailed, field_error
from abate.models import CorrectiveAction

# A header row is looked for among this many rows at the top of a sheet (title rows may sit above it).
HEADER_SEARCH_ROWS = 30
DEFAULT_ACTION_KIND = "prevention"
# What a kind cell may say, after normalising, for each action kind.
ACTION_KIND_WORDS = {"prevention": "prevention", "detection": "detection", "designchange": "design_change"}
# Text fields accept what the API's ModeSchema accepts; action columns are bounded by the table's columns.
TEXT_LIMIT = 10000
DATE_FORMATS = ("%Y-%m-%d", "%Y/%m/%d", "%d.%m.%Y", "%Y-%m-%d %H:%M:%S", "%Y-%m-%dT%H:%M:%S")
# Excel serial day numbers of 1900-01-01 and 9999-12-31: a bare number there in a date cell is a date.
EXCEL_SERIAL_RANGE = (1, 2958465)
CSV_DELIMITERS = ",;\t|"
SNIFF_BYTES = 65536
_EMAIL = ma.validate.Email()
_NAME_AND_ADDRESS = re.compile(r"^(.*?)\s*<([^<>]+)>$")
_MERGE_REF = re.compile(rb'<(?:\w+:)?mergeCell\s+ref="([A-Z]+[0-9]+:[A-Z]+[0-9]+)"')
# What openpyxl, zipfile and zlib raise on a damaged workbook (SyntaxError covers XML parse errors).
DAMAGED_WORKBOOK_ERRORS = (
    KeyError,
    ValueError,
    TypeError,
    AttributeError,
    SyntaxError,
    OSError,
    EOFError,
    zlib.error,
    zipfile.BadZipFile,
)


class UnreadableWorksheet(ValidationFailed):
    """The upload is not a CSV, XLSX or JSON export that can be read."""

    slug = "unreadable-worksheet"


class CellProblem(Exception):
    """One cell's value cannot be used; the message says why."""


def normalised_title(title):
    """A column title compared without case, spaces or punctuation: 'Due  Date' and 'due-date' are one."""
    return re.sub(r"[^0-9a-z]", "", str(title).casefold())


def safe_file_name(name):
    """The last part of an uploaded file's name, printable and short: it only ever goes into event reasons."""
    base = PureWindowsPath(name or "").name
    base = "".join(character for character in base if character.isprintable()).strip()[:200]
    return base or "upload"


def _decode_check(stream):
    """The text encoding of a CSV: UTF-8 (with or without BOM), else Windows-1252; NUL bytes mean not text."""
    stream.seek(0)
    if stream.read(len(codecs.BOM_UTF8)) == codecs.BOM_UTF8:
        return "utf-8-sig"
    stream.seek(0)
    decoder = codecs.getincrementaldecoder("utf-8")()
    try:
        for chunk in iter(lambda: stream.read(SNIFF_BYTES), b""):
            if b"\x00" in chunk:
                raise UnreadableWorksheet("the file holds NUL bytes: it is not CSV text (UTF-16 or binary?)")
            decoder.decode(chunk)
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        return "cp1252"
    return "utf-8"


def _text_lines(stream, encoding):
    """The stream's lines decoded, line by line, from the top."""
    stream.seek(0)
    try:
        yield from codecs.iterdecode(stream, encoding)
    except UnicodeDecodeError as error:
        raise UnreadableWorksheet("the file is neither UTF-8 nor Windows-1252 text") from error


def _delimiter(stream, encoding):
    """The delimiter csv.Sniffer finds in the first lines; failing that, the candidate seen most often."""
    sample, size = [], 0
    for line in _text_lines(stream, encoding):
        sample.append(line)
        size += len(line)
        if size >= SNIFF_BYTES or len(sample) >= HEADER_SEARCH_ROWS * 2:
            break
    text = "".join(sample)
    try:
        return csv.Sniffer().sniff(text, delimiters=CSV_DELIMITERS).delimiter
    except csv.Error:
        # Title lines above the header make the Sniffer's consistency test fail; counting still works.
        counts = {candidate: text.count(candidate) for candidate in CSV_DELIMITERS}
        best = max(counts, key=counts.get)
        return best if counts[best] else ","


@dataclass
class CsvSheet:
    """A CSV file, read from the top on every pass."""

    stream: object
    encoding: str
    delimiter: str
    name: str = None
    format: str = "csv"

    def rows(self):
        """(row number, values) for every line, numbered as a spreadsheet program shows them."""
        reader = csv.reader(_text_lines(self.stream, self.encoding), delimiter=self.delimiter)
        try:
            yield from enumerate(reader, start=1)
        except csv.Error as error:
            raise UnreadableWorksheet(f"the CSV cannot be read near line {reader.line_num}: {error}") from error


def _merged_ranges(worksheet):
    """(min_col, min_row, max_col, max_row) of each merged range, scanned from the sheet's raw XML.

    A read-only worksheet does not parse merges, and they sit after the rows in the file, so a fast
    byte scan finds them before the rows are streamed.
    """
    ranges, tail = [], b""
    try:
        # The worksheet part's reader is private to openpyxl; it is the one way to the raw XML it streams.
        with worksheet._get_source() as source:
            for chunk in iter(lambda: source.read(SNIFF_BYTES), b""):
                text = tail + chunk
                ranges += [range_boundaries(match.decode()) for match in _MERGE_REF.findall(text)]
                # Keep a short tail so that a reference cut by the chunk boundary is seen whole next time,
                # dropping whatever the matches above already used.
                last = max((match.end() for match in _MERGE_REF.finditer(text)), default=0)
                tail = text[max(last, len(text) - 100) :]
    except DAMAGED_WORKBOOK_ERRORS as error:
        raise UnreadableWorksheet(f"the workbook's sheet {worksheet.title!r} cannot be read: {error}") from error
    return ranges


def _fill_merged(rows, ranges):
    """Give every cell of a merged range the value of its top-left cell, as the sheet shows it."""
    starting = {}
    for bounds in ranges:
        starting.setdefault(bounds[1], []).append(bounds)
    active = []
    for number, values in rows:
        if not starting and not active:
            yield number, values
            continue
        values = list(values)
        for min_col, _, max_col, max_row in starting.get(number, ()):
            active.append(((min_col, max_col, max_row), values[min_col - 1] if len(values) >= min_col else None))
        for (min_col, max_col, _), value in active:
            values.extend([None] * (max_col - len(values)))
            values[min_col - 1 : max_col] = [value] * (max_col - min_col + 1)
        active = [(bounds, value) for bounds, value in active if bounds[2] > number]
        yield number, values


@dataclass
class XlsxSheet:
    """One worksheet of a workbook opened read-only, streamed row by row on every pass."""

    worksheet: object
    merges: list
    name: str
    format: str = "xlsx"

    def rows(self):
        """(row number, values) for every row of the sheet, merged cells filled in."""
        try:
            yield from _fill_merged(enumerate(self.worksheet.iter_rows(values_only=True), start=1), self.merges)
        except DAMAGED_WORKBOOK_ERRORS as error:
            raise UnreadableWorksheet(f"the workbook's sheet {self.name!r} cannot be read: {error}") from error


def _open_workbook(stream, sheet_name):
    """(workbook, XlsxSheet) of the named or first worksheet, opened read-only for streaming."""
    try:
        workbook = openpyxl.load_workbook(stream, read_only=True, data_only=True)
    except DAMAGED_WORKBOOK_ERRORS as error:
        raise UnreadableWorksheet(f"the file is not a readable XLSX workbook: {error}") from error
    names = workbook.sheetnames
    worksheets = workbook.worksheets
    if not worksheets:
        workbook.close()
        raise UnreadableWorksheet("the workbook has no worksheet")
    if sheet_name is None:
        worksheet = worksheets[0]
    elif sheet_name in names and workbook[sheet_name] in worksheets:
        worksheet = workbook[sheet_name]
    else:
        workbook.close()
        raise ValidationFailed(
            "no such sheet", errors=[field_error("sheet", f"the workbook's sheets are {', '.join(names)}", "query")]
        )
    # A wrong <dimension> record would cut rows off; reading to the real end costs nothing extra.
    worksheet.reset_dimensions()
    return workbook, XlsxSheet(worksheet, _merged_ranges(worksheet), worksheet.title)


def _first_bytes(stream):
    """The first few bytes after any BOM and leading white space, which tell the file's format."""
    stream.seek(0)
    head = stream.read(SNIFF_BYTES).removeprefix(codecs.BOM_UTF8).lstrip()
    stream.seek(0)
    return head[:8]


def is_blank(value):
    """True for an empty cell or one holding only spaces."""
    return value is None or (isinstance(value, str) and not value.strip())


def text_value(value, limit=TEXT_LIMIT):
    """A cell as stripped text ("" when blank); whole numbers lose their ".0" and dates read as YYYY-MM-DD."""
    if is_blank(value):
        return ""
    if isinstance(value, float) and value.is_integer():
        value = int(value)
    elif isinstance(value, datetime.datetime):
        value = value.date() if value.time() == datetime.time(0) else value
    text = value.isoformat() if isinstance(value, datetime.date) else str(value).strip()
    if len(text) > limit:
        raise CellProblem(f"is {len(text)} characters long; at most {limit}")
    return text


def rating_value(value, maximum, scale_name):
    """A cell as a whole-number rating 1..maximum; numbers stored as text count."""
    if is_blank(value):
        raise CellProblem(f"is missing; give a whole number from 1 to {maximum}")
    if isinstance(value, bool) or not isinstance(value, int | float | str):
        raise CellProblem(f"{value!r} is not a whole number from 1 to {maximum}")
    try:
        # Numbers stored as text, with a decimal comma or point, count as the numbers they spell.
        number = float(value.strip().replace(",", ".")) if isinstance(value, str) else float(value)
    except ValueError:
        raise CellProblem(f"{value.strip()!r} is not a number") from None
    if not number.is_integer():
        raise CellProblem(f"{value} is not a whole number")
    if not 1 <= number <= maximum:
        raise CellProblem(
            f"{int(number)} lies outside the study's scale: must be between 1 and {maximum} on {scale_name!r}"
        )
    return int(number)


def date_value(value):
    """A cell as a date: a date cell, its serial day number, or text as YYYY-MM-DD, YYYY/MM/DD or DD.MM.YYYY."""
    if isinstance(value, datetime.datetime):
        return value.date()
    if isinstance(value, datetime.date):
        return value
    if isinstance(value, int | float) and not isinstance(value, bool):
        # A date cell that lost its date format shows its serial day number.
        if EXCEL_SERIAL_RANGE[0] <= value <= EXCEL_SERIAL_RANGE[1]:
            return from_excel(value).date()
        raise CellProblem(f"{value} is not a date")
    text = str(value).strip()
    for pattern in DATE_FORMATS:
        try:
            return datetime.datetime.strptime(text, pattern).date()
        except ValueError:
            continue
    raise CellProblem(f"{text!r} is not a date (or is ambiguous); write it as YYYY-MM-DD")


def owner_value(owner_cell, email_cell):
    """{name, email} from 'Name <address>', a bare address, or a name beside an e-mail column."""
    name = text_value(owner_cell, CorrectiveAction.owner_name.max_length)
    address = text_value(email_cell, CorrectiveAction.owner_email.max_length)
    if not address:
        match = _NAME_AND_ADDRESS.match(name)
        if match:
            name, address = match.group(1).strip().strip('"'), match.group(2).strip()
        elif "@" in name:
            name, address = "", name
    if not address:
        raise CellProblem(
            f"{name!r} has no e-mail address; write 'Name <name@example.com>' or add an owner e-mail column"
        )
    try:
        _EMAIL(address)
    except ma.ValidationError:
        raise CellProblem(f"{address!r} is not an e-mail address") from None
    return {"name": name or address, "email": address}


def action_kind_value(value):
    """A cell as an action kind; blank means prevention."""
    if is_blank(value):
        return DEFAULT_ACTION_KIND
    kind = ACTION_KIND_WORDS.get(normalised_title(value))
    if kind is None:
        raise CellProblem(f"{str(value).strip()!r} is not an action kind; use prevention, detection or design change")
    return kind


@dataclass
class JsonExport:
    """An Abate JSON export: its list of modes, each with its actions."""

    modes: list
    name: str = None
    format: str = "json"


def _json_export(stream):
    """The JSON export in the stream; it is our own format, small enough to parse whole."""
    stream.seek(0)
    try:
        document = json.loads(stream.read().decode("utf-8-sig"))
    except (UnicodeDecodeError, ValueError) as error:
        raise UnreadableWorksheet(f"the file looks like JSON but cannot be parsed: {error}") from error
    if not isinstance(document, dict) or not isinstance(document.get("modes"), list):
        raise UnreadableWorksheet("a JSON import must be an Abate study export: an object with a list of modes")
    return JsonExport(document["modes"])


def open_upload(stream, sheet_name):
    """(JsonExport, CsvSheet or XlsxSheet, the workbook to close or None), told apart by content, not name."""
    head = _first_bytes(stream)
    if not head:
        raise UnreadableWorksheet("the file is empty")
    if head.startswith(b"{"):
        return _json_export(stream), None
    if head.startswith(b"\xd0\xcf\x11\xe0"):
        raise UnreadableWorksheet("this is an old binary .xls workbook; save it as .xlsx or CSV")
    if head.startswith(b"PK\x03\x04"):
        workbook, sheet = _open_workbook(stream, sheet_name)
        return sheet, workbook
    encoding = _decode_check(stream)
    return CsvSheet(stream, encoding, _delimiter(stream, encoding)), None
