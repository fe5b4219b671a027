"""Editing a workbook package (the zip) so that only what sheetnet owns changes.

A workbook file is a zip of XML parts. Saving it through a library that reads
the whole workbook and writes it out again drops what that library does not
model (charts, pivot tables, newer conditional formats, web extensions...).
So sheetnet never rewrites the user's parts: `write_package` copies every
part it does not own byte for byte and only

- generates the worksheet parts of its own sheets (inline strings, so the shared
  strings stay as they were; style 0 except for cells given a number format and
  columns given a width, see `add_number_formats`);
- adds to ``xl/styles.xml``, as text, one number format and one cell format per
  format code sheetnet's sheets use (appended, so every existing style index keeps
  its meaning), and only when they use one;
- edits, as text, the few shared parts that list sheets and names:
  ``xl/workbook.xml`` (the ``<sheet>`` entries, ``<definedNames>``), the
  workbook's relationships and ``[Content_Types].xml``; a text edit leaves every
  namespace prefix, ``mc:Ignorable`` list and extension in them as it was;
- inserts cells aimed at a user's sheet (an empty target range) into that
  sheet's ``<sheetData>``, changing nothing else in the part but its
  ``<dimension>`` and the ``spans`` of the rows it touches;
- drops ``xl/calcChain.xml`` (a cache of formula cells the spreadsheet program
  rebuilds) only when it lists a sheet sheetnet replaced or removed.

``docProps/app.xml`` (the titles of the sheets, a summary the spreadsheet
program rewrites on its next save) is left untouched.

`open_package` checks a file before anything parses it: the zip directory
against `PART_LIMIT`, `TOTAL_LIMIT` and `RATIO_LIMIT`, then every XML part for a
document type or entity declarations, which a workbook never needs.
"""

from __future__ import annotations

import datetime as dt
import io
import math
import numbers
import posixpath
import re
import zipfile
from dataclasses import dataclass, field
from typing import Any, BinaryIO, Iterable

from .errors import SheetnetError
from .placements import Placements, column_letters, same_title

TOTAL_LIMIT = 1 << 30  # all parts together, uncompressed: 1 GiB
PART_LIMIT = 512 << 20  # one part, uncompressed: 512 MiB
RATIO_LIMIT = 500  # a part over RATIO_FLOOR may expand at most this many times its stored size
RATIO_FLOOR = 1 << 20
MAX_PARTS = 50_000
CELL_TEXT_LIMIT = 32_767  # characters a spreadsheet cell holds

MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
REL_NS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
WORKSHEET_REL = REL_NS + "/worksheet"
WORKSHEET_TYPE = "application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
CALC_CHAIN_REL = REL_NS + "/calcChain"
DECLARATION = re.compile(rb"<!\s*(doctype|entity)", re.IGNORECASE)


RESAVE = "open it in a spreadsheet program and save it again"
OUR_SHEET_INSTEAD = "write into a sheet of sheetnet's instead (leave out --to)"


class PackageError(SheetnetError):
    """A workbook package cannot be read or edited safely."""


# --- reading and checking -----------------------------------------------------------------

@dataclass
class Package:
    """An opened, checked workbook zip; ``label`` names the file in messages."""

    label: str
    archive: zipfile.ZipFile
    infos: list[zipfile.ZipInfo]

    def __post_init__(self) -> None:
        self._names = {info.filename for info in self.infos}

    def has(self, part: str) -> bool:
        return part in self._names

    def read(self, part: str) -> bytes:
        try:
            return self.archive.read(part)
        except (zipfile.BadZipFile, OSError, EOFError, ValueError, NotImplementedError, RuntimeError):
            raise PackageError(f"the part {part} of {self.label} cannot be unpacked, so the file is damaged; {RESAVE}") from None

    def text(self, part: str) -> str:
        try:
            return self.read(part).decode("utf-8")
        except UnicodeDecodeError:
            raise PackageError(f"the part {part} of {self.label} is not UTF-8 text; save the workbook again in a spreadsheet program") from None


def open_package(data: bytes, label: str) -> Package:
    """The zip in ``data``, refused (with a `PackageError` naming ``label``) when it is damaged,
    expands beyond the limits above, or holds an XML part with a document type or entities."""
    try:
        archive = zipfile.ZipFile(io.BytesIO(data))
        infos = archive.infolist()
    except (zipfile.BadZipFile, zipfile.LargeZipFile, ValueError, OSError, EOFError):
        raise PackageError(f"{label} is damaged or is not a workbook file (it is not a readable zip package); {RESAVE}") from None
    check_budget(infos, label)
    for info in infos:
        if info.filename.lower().endswith((".xml", ".rels", ".vml")) or _looks_like_xml(archive, info, label):
            check_no_declarations(_read_capped(archive, info, label), info.filename, label)
    return Package(label, archive, infos)


def check_budget(infos: list[zipfile.ZipInfo], label: str) -> None:
    """Refuse, from the zip directory alone, an archive that would expand beyond the limits."""
    if len(infos) > MAX_PARTS:
        raise PackageError(f"{label} holds {len(infos):,} parts, more than the {MAX_PARTS:,} sheetnet reads; it is not an ordinary workbook")
    names = [info.filename for info in infos]
    if len(set(names)) != len(names):
        raise PackageError(f"{label} lists a part twice, so it is damaged; {RESAVE}")
    total = 0
    for info in infos:
        if info.file_size > PART_LIMIT:
            raise PackageError(
                f"the part {info.filename} of {label} would expand to {info.file_size:,} bytes, beyond the {PART_LIMIT:,} sheetnet accepts; it was not read"
            )
        if info.file_size > RATIO_FLOOR and info.file_size > RATIO_LIMIT * max(info.compress_size, 1):
            raise PackageError(
                f"the part {info.filename} of {label} would expand {info.file_size / max(info.compress_size, 1):,.0f} times its stored size "
                f"(more than {RATIO_LIMIT} times), as archives built to exhaust memory do; it was not read"
            )
        total += info.file_size
    if total > TOTAL_LIMIT:
        raise PackageError(f"{label} would expand to {total:,} bytes, beyond the {TOTAL_LIMIT:,} sheetnet accepts; it was not read")


def _looks_like_xml(archive: zipfile.ZipFile, info: zipfile.ZipInfo, label: str) -> bool:
    # any part may be named as XML by a relationship, whatever its extension
    try:
        with archive.open(info) as stream:
            head = stream.read(64)
    except (zipfile.BadZipFile, OSError, EOFError, ValueError, NotImplementedError, RuntimeError):
        raise PackageError(f"the part {info.filename} of {label} cannot be unpacked, so the file is damaged; {RESAVE}") from None
    return head.lstrip(b"\xef\xbb\xbf\xff\xfe \t\r\n\x00").startswith(b"<")


def _read_capped(archive: zipfile.ZipFile, info: zipfile.ZipInfo, label: str) -> bytes:
    # a directory entry may understate the size: read no more than it declares (plus one byte to notice)
    try:
        with archive.open(info) as stream:
            data = stream.read(info.file_size + 1)
    except (zipfile.BadZipFile, OSError, EOFError, ValueError, NotImplementedError, RuntimeError):
        raise PackageError(f"the part {info.filename} of {label} cannot be unpacked, so the file is damaged; {RESAVE}") from None
    if len(data) > info.file_size:
        raise PackageError(f"the part {info.filename} of {label} is longer than its archive entry says, so the file is damaged or crafted; it was not read")
    return data


def check_no_declarations(data: bytes, part: str, label: str) -> None:
    """Refuse an XML part declaring a document type or entities (entity expansion, outside files)."""
    head = data
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):  # UTF-16: look at the text, not the bytes
        head = data.decode("utf-16", errors="replace").encode("utf-8")
    if DECLARATION.search(head):
        raise PackageError(
            f"the part {part} of {label} declares a document type or entities, which workbooks never need and which can be used "
            "to attack the program reading it; the file was not read. Open it in a spreadsheet program you trust and save it again"
        )


# --- small text tools for XML edited as text ----------------------------------------------

ATTRIBUTE = re.compile(r"""([\w:.-]+)\s*=\s*(?:"([^"]*)"|'([^']*)')""")
ENTITY = re.compile(r"&(#x[0-9A-Fa-f]+|#[0-9]+|amp|lt|gt|quot|apos);")
INVALID_XML_CHAR = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff]")
CELL_REF = re.compile(r"^\$?([A-Z]{1,3})\$?([0-9]+)$")


def attributes(tag: str) -> dict[str, str]:
    """The attributes of one start tag, unescaped."""
    return {m.group(1): unescape(m.group(2) if m.group(2) is not None else m.group(3)) for m in ATTRIBUTE.finditer(tag)}


def unescape(text: str) -> str:
    def one(match: re.Match[str]) -> str:
        code = match.group(1)
        if code.startswith("#x"):
            return chr(int(code[2:], 16))
        if code.startswith("#"):
            return chr(int(code[1:]))
        return {"amp": "&", "lt": "<", "gt": ">", "quot": '"', "apos": "'"}[code]

    return ENTITY.sub(one, text)


def escape(text: str, quote: bool = False) -> str:
    text = text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return text.replace('"', "&quot;") if quote else text


def cell_text(text: str) -> str:
    """Text for a cell: XML-escaped, characters XML cannot hold written as the format's _xHHHH_."""
    return INVALID_XML_CHAR.sub(lambda m: f"_x{ord(m.group(0)):04X}_", escape(text))


def namespace_prefix(xml: str, namespace: str) -> str | None:
    """The prefix (with its colon, '' for the default namespace) the root element binds to ``namespace``."""
    root = re.search(r"<(?![?!])[^>]*>", xml)
    if root is None:
        return None
    for name, value in attributes(root.group(0)).items():
        if value == namespace and (name == "xmlns" or name.startswith("xmlns:")):
            return "" if name == "xmlns" else name[6:] + ":"
    return None


def element_pattern(prefix: str, name: str) -> re.Pattern[str]:
    """One element, empty or with content (not nested in itself): groups ``attrs`` and ``inner``."""
    p = re.escape(prefix + name)
    return re.compile(rf"<{p}(?P<attrs>\s[^>]*?)?(?:/>|>(?P<inner>.*?)</{p}\s*>)", re.DOTALL)


def column_number(letters: str) -> int:
    number = 0
    for letter in letters:
        number = number * 26 + ord(letter) - 64
    return number


def split_cell(reference: str) -> tuple[int, int]:
    """``B7`` as (row 7, column 2)."""
    match = CELL_REF.match(reference.upper())
    if match is None:
        raise PackageError(f"'{reference}' is not a cell address")
    return int(match.group(2)), column_number(match.group(1))


# --- cells sheetnet writes ----------------------------------------------------------------

@dataclass(frozen=True)
class Cell:
    """One cell sheetnet writes, rendered with the prefix of the part it goes into."""

    kind: str  # 'n' number, 'b' boolean, 'e' error, 'str' text (inline), 'f' formula
    body: str  # already escaped for XML
    array: bool = False  # formulas: a single-cell array formula
    preserve: bool = False  # text: keep its leading and trailing spaces

    def xml(self, prefix: str, reference: str, style: str | None = None) -> str:
        p = prefix
        s = f' s="{style}"' if style else ""
        if self.kind == "str":
            space = ' xml:space="preserve"' if self.preserve else ""
            return f'<{p}c r="{reference}"{s} t="inlineStr"><{p}is><{p}t{space}>{self.body}</{p}t></{p}is></{p}c>'
        if self.kind == "f":
            kind = f' t="array" ref="{reference}"' if self.array else ""
            return f'<{p}c r="{reference}"{s}><{p}f{kind}>{self.body}</{p}f></{p}c>'
        t = "" if self.kind == "n" else f' t="{self.kind}"'
        return f'<{p}c r="{reference}"{s}{t}><{p}v>{self.body}</{p}v></{p}c>'


def value_cell(value: Any) -> Cell | None:
    """A value as a cell: strings always as inline text (never a formula), numbers, booleans; None is no cell.
    Dates and times, which sheetnet never places itself, are written as their ISO text."""
    if value is None:
        return None
    if isinstance(value, bool) or (hasattr(value, "dtype") and getattr(value.dtype, "kind", "") == "b"):
        return Cell("b", "1" if value else "0")
    if isinstance(value, numbers.Integral):
        return Cell("n", str(int(value)))
    if isinstance(value, numbers.Real):
        number = float(value)
        return Cell("n", repr(number)) if math.isfinite(number) else Cell("e", "#NUM!")
    if isinstance(value, (dt.datetime, dt.date, dt.time)):
        value = value.isoformat(sep=" ") if isinstance(value, dt.datetime) else value.isoformat()
    text = str(value)
    if len(text) > CELL_TEXT_LIMIT:
        raise PackageError(f"a text of {len(text):,} characters is longer than a cell holds ({CELL_TEXT_LIMIT:,}); shorten it")
    return Cell("str", cell_text(text), preserve=text != text.strip() or "\n" in text)


def formula_cell(text: str, array: bool) -> Cell:
    return Cell("f", cell_text(text[1:] if text.startswith("=") else text), array=array)


Grid = dict[tuple[int, int], Cell]


def worksheet_xml(cells: Grid, styles: dict[tuple[int, int], int] | None = None, widths: dict[int, float] | None = None) -> bytes:
    """A whole worksheet part of sheetnet's own: column widths, then rows in order, cells in order;
    ``styles`` gives the cell format index of a cell that has one."""
    styles = styles or {}
    rows: dict[int, list[tuple[int, Cell]]] = {}
    for (row, column), cell in cells.items():
        rows.setdefault(row, []).append((column, cell))
    out = [
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n',
        f'<worksheet xmlns="{MAIN_NS}" xmlns:r="{REL_NS}">',
    ]
    if cells:
        top, bottom = min(rows), max(rows)
        left = min(c for row in rows.values() for c, _ in row)
        right = max(c for row in rows.values() for c, _ in row)
        out.append(f'<dimension ref="{column_letters(left)}{top}:{column_letters(right)}{bottom}"/>')
    if widths:
        out.append("<cols>" + "".join(f'<col min="{c}" max="{c}" width="{w:.4g}" customWidth="1"/>' for c, w in sorted(widths.items())) + "</cols>")
    out.append("<sheetData>")
    for row in sorted(rows):
        out.append(f'<row r="{row}">')
        out.extend(
            cell.xml("", f"{column_letters(column)}{row}", str(styles[(row, column)]) if (row, column) in styles else None)
            for column, cell in sorted(rows[row], key=lambda pair: pair[0])
        )
        out.append("</row>")
    out.append("</sheetData></worksheet>")
    return "".join(out).encode("utf-8")


def insert_cells(xml: str, cells: Grid, label: str) -> str:
    """A user's worksheet part with ``cells`` inserted into its rows, in order; nothing else changes
    but ``<dimension>`` and the ``spans`` of touched rows. A target cell holding anything is refused."""
    p = namespace_prefix(xml, MAIN_NS)
    if p is None:
        raise PackageError(f"the sheet {label} is not written the usual way, so sheetnet does not add cells to it; {OUR_SHEET_INSTEAD}")
    data = re.search(rf"<{re.escape(p)}sheetData(\s[^>]*?)?(/>|>)", xml)
    if data is None:
        raise PackageError(f"the sheet {label} has no cell table; {OUR_SHEET_INSTEAD}")
    wanted: dict[int, dict[int, Cell]] = {}
    for (row, column), cell in cells.items():
        wanted.setdefault(row, {})[column] = cell
    if data.group(2) == "/>":
        body = "".join(_new_row(p, row, wanted[row]) for row in sorted(wanted))
        patched = xml[:data.start()] + f"<{p}sheetData{data.group(1) or ''}>{body}</{p}sheetData>" + xml[data.end():]
        return _widen_dimension(patched, p, cells)
    end = xml.find(f"</{p}sheetData>", data.end())
    if end < 0:
        raise PackageError(f"the sheet {label} is damaged (its cell table does not end); {RESAVE}")
    inner = xml[data.end():end]
    pieces: list[str] = []
    position = 0
    previous = 0
    pending = sorted(wanted)
    for match in element_pattern(p, "row").finditer(inner):
        tag = match.group("attrs") or ""
        number = attributes(tag).get("r")
        if number is None or not number.isdigit():
            raise PackageError(f"the sheet {label} lists rows without their numbers; {RESAVE}")
        row = int(number)
        if row <= previous:
            raise PackageError(f"the sheet {label} lists its rows out of order; {RESAVE}")
        previous = row
        pieces.append(inner[position:match.start()])
        while pending and pending[0] < row:
            pieces.append(_new_row(p, pending[0], wanted[pending.pop(0)]))
        if pending and pending[0] == row:
            pieces.append(_patched_row(p, match, row, wanted[pending.pop(0)], label))
        else:
            pieces.append(match.group(0))
        position = match.end()
    tail = inner[position:]
    pieces.append("".join(_new_row(p, row, wanted[row]) for row in pending))
    pieces.append(tail)
    patched = xml[:data.end()] + "".join(pieces) + xml[end:]
    return _widen_dimension(patched, p, cells)


def _new_row(p: str, row: int, cells: dict[int, Cell]) -> str:
    body = "".join(cells[c].xml(p, f"{column_letters(c)}{row}") for c in sorted(cells))
    return f'<{p}row r="{row}">{body}</{p}row>'


def _patched_row(p: str, match: re.Match[str], row: int, cells: dict[int, Cell], label: str) -> str:
    attrs = match.group("attrs") or ""
    content = match.group("inner") or ""
    pieces: list[str] = []
    position = 0
    pending = sorted(cells)
    columns: list[int] = []
    for cell in element_pattern(p, "c").finditer(content):
        reference = attributes(cell.group("attrs") or "").get("r")
        if reference is None:
            raise PackageError(f"the sheet {label} lists cells without their addresses; {RESAVE}")
        column = split_cell(reference)[1]
        columns.append(column)
        pieces.append(content[position:cell.start()])
        while pending and pending[0] < column:
            c = pending.pop(0)
            pieces.append(cells[c].xml(p, f"{column_letters(c)}{row}"))
        if pending and pending[0] == column:
            pending.pop(0)
            if (cell.group("inner") or "").strip():
                raise PackageError(f"cell {label}!{reference} is not empty; sheetnet writes only into empty cells: clear the range or name another one")
            style = attributes(cell.group("attrs") or "").get("s")  # a formatted blank keeps its format
            pieces.append(cells[column].xml(p, f"{column_letters(column)}{row}", style))
        else:
            pieces.append(cell.group(0))
        position = cell.end()
    pieces.append("".join(cells[c].xml(p, f"{column_letters(c)}{row}") for c in pending))
    pieces.append(content[position:])
    spans = attributes(attrs).get("spans")
    if spans is not None:
        bounds = [int(n) for part in spans.split() for n in part.split(":") if n.isdigit()] + list(cells)
        attrs = re.sub(r"""\sspans\s*=\s*("[^"]*"|'[^']*')""", f' spans="{min(bounds)}:{max(bounds)}"', attrs, count=1)
    return f"<{p}row{attrs}>{''.join(pieces)}</{p}row>"


def _widen_dimension(xml: str, p: str, cells: Grid) -> str:
    match = re.search(rf"""<{re.escape(p)}dimension\s+ref\s*=\s*("[^"]*"|'[^']*')\s*/>""", xml)
    if match is None:
        return xml
    corners = match.group(1)[1:-1].split(":")
    try:
        points = [split_cell(c) for c in corners] + list(cells)
    except PackageError:
        return xml
    top, bottom = min(r for r, _ in points), max(r for r, _ in points)
    left, right = min(c for _, c in points), max(c for _, c in points)
    ref = f"{column_letters(left)}{top}" + ("" if (top, left) == (bottom, right) else f":{column_letters(right)}{bottom}")
    return xml[:match.start()] + f'<{p}dimension ref="{ref}"/>' + xml[match.end():]


# --- the workbook's list of sheets and names ----------------------------------------------

@dataclass
class SheetEntry:
    """One sheet of the workbook as sheetnet tracks it while applying placements."""

    title: str
    part: str  # path inside the zip
    original: str | None  # the <sheet> element as the file has it; None for a sheet sheetnet adds
    sheet_id: int
    rel_id: str
    is_worksheet: bool
    visibility: str = "visible"
    dropped: bool = False
    generated: Grid | None = None  # a sheet of sheetnet's, written afresh
    inserted: Grid = field(default_factory=dict)  # cells added to a user's sheet
    formats: dict[tuple[int, int], str] = field(default_factory=dict)  # a sheet of sheetnet's: cell -> Excel format code
    widths: dict[int, float] = field(default_factory=dict)  # a sheet of sheetnet's: column -> width in characters


@dataclass
class NameEntry:
    name: str
    original: str | None  # the element as the file has it; None for a name sheetnet adds
    reference: str = ""
    local: bool = False
    dropped: bool = False


def _resolve(base_part: str, target: str) -> str:
    if target.startswith("/"):
        return target.lstrip("/")
    return posixpath.normpath(posixpath.join(posixpath.dirname(base_part), target))


def _rels_path(part: str) -> str:
    folder, name = posixpath.split(part)
    return posixpath.join(folder, "_rels", name + ".rels")


def _relationships(xml: str) -> list[tuple[re.Match[str], dict[str, str]]]:
    return [(m, attributes(m.group(0))) for m in re.finditer(r"<(?:[\w.-]+:)?Relationship\b[^>]*?(?:/>|>\s*</(?:[\w.-]+:)?Relationship\s*>)", xml)]


class WorkbookParts:
    """The workbook part, its relationships and the content types, as text, with the sheets and names they list."""

    def __init__(self, package: Package) -> None:
        self.package = package
        label = package.label
        if not package.has("[Content_Types].xml") or not package.has("_rels/.rels"):
            raise PackageError(f"{label} lacks the parts every workbook has, so it is damaged or not a workbook; {RESAVE}")
        root = [a for _, a in _relationships(package.text("_rels/.rels")) if a.get("Type", "").endswith("/officeDocument")]
        if not root:
            raise PackageError(f"{label} names no workbook part, so it is damaged; {RESAVE}")
        self.workbook_part = _resolve("", root[0]["Target"])
        self.rels_part = _rels_path(self.workbook_part)
        if not package.has(self.workbook_part) or not package.has(self.rels_part):
            raise PackageError(f"{label} lacks its workbook part, so it is damaged; {RESAVE}")
        self.workbook = package.text(self.workbook_part)
        self.rels = package.text(self.rels_part)
        self.types = package.text("[Content_Types].xml")
        prefix = namespace_prefix(self.workbook, MAIN_NS)
        rel_prefix = namespace_prefix(self.workbook, REL_NS)
        if prefix is None or rel_prefix is None or rel_prefix == "":
            raise PackageError(
                f"{label} is written in a form of the workbook format sheetnet does not edit (strict or unusual namespaces); "
                "save it as an ordinary .xlsx workbook"
            )
        self.p, self.r = prefix, rel_prefix
        self.rel_targets = {a["Id"]: (a.get("Type", ""), _resolve(self.workbook_part, a.get("Target", ""))) for _, a in _relationships(self.rels) if "Id" in a}
        self.sheets = self._read_sheets()
        self.names = self._read_names()
        self.taken_parts = {info.filename.casefold() for info in package.infos}
        self.taken_ids = set(self.rel_targets)

    def _sheets_block(self) -> re.Match[str]:
        match = re.search(rf"<{re.escape(self.p)}sheets(\s[^>]*?)?(?:/>|>(.*?)</{re.escape(self.p)}sheets\s*>)", self.workbook, re.DOTALL)
        if match is None:
            raise PackageError(f"{self.package.label} lists no sheets, so it is damaged; {RESAVE}")
        return match

    def _read_sheets(self) -> list[SheetEntry]:
        entries = []
        block = self._sheets_block()
        for match in element_pattern(self.p, "sheet").finditer(block.group(2) or ""):
            values = attributes(match.group("attrs") or "")
            rel_id = values.get(f"{self.r}id", "")
            kind, part = self.rel_targets.get(rel_id, ("", ""))
            entries.append(SheetEntry(
                values.get("name", ""), part, match.group(0), int(values.get("sheetId", "0") or 0), rel_id,
                kind == WORKSHEET_REL, values.get("state", "visible"),
            ))
        return entries

    def _names_block(self) -> re.Match[str] | None:
        p = re.escape(self.p)
        return re.search(rf"<{p}definedNames(\s[^>]*?)?(?:/>|>(.*?)</{p}definedNames\s*>)", self.workbook, re.DOTALL)

    def _read_names(self) -> list[NameEntry]:
        block = self._names_block()
        if block is None:
            return []
        entries = []
        for match in element_pattern(self.p, "definedName").finditer(block.group(2) or ""):
            values = attributes(match.group("attrs") or "")
            entries.append(NameEntry(values.get("name", ""), match.group(0), unescape(match.group("inner") or ""), "localSheetId" in values))
        return entries

    # -- applying placements --

    def sheet(self, title: str) -> SheetEntry:
        for entry in self.sheets:
            if not entry.dropped and same_title(entry.title, title):
                return entry
        raise PackageError(f"the workbook has no sheet named '{title}' to write into")

    def apply(self, placements: Placements) -> None:
        """Apply in the documented order (see `sheetnet.placements`)."""
        dropped = {n.casefold() for n in placements.drop_names}
        for name in self.names:
            if not name.local and name.name.casefold() in dropped:
                name.dropped = True
        for title in placements.drop_sheets:
            for entry in self.sheets:
                if not entry.dropped and same_title(entry.title, title):
                    self._check_droppable(entry)
                    entry.dropped = True
        for plan in placements.sheets:
            revived = next((e for e in reversed(self.sheets) if e.dropped and same_title(e.title, plan.title)), None)
            if any(not e.dropped and same_title(e.title, plan.title) for e in self.sheets):
                raise PackageError(f"the workbook already has a sheet named '{plan.title}'; rename it")
            if revived is not None:  # the same sheet of ours again: keep its place, id and part
                revived.dropped, revived.title, revived.visibility, revived.generated = False, plan.title, plan.visibility, {}
                revived.formats, revived.widths = {}, {}
            else:
                entry = SheetEntry(plan.title, self._free_part(), None, self._free_sheet_id(), self._free_rel_id(), True, plan.visibility, generated={})
                self.sheets.append(entry)
        for block in placements.cells:
            grid = self._grid(block.sheet)
            for i, row in enumerate(block.values):
                for j, value in enumerate(row):
                    cell = value_cell(value)
                    if cell is not None:
                        grid[(block.top + i, block.left + j)] = cell
        for formulas in placements.formulas:
            grid = self._grid(formulas.sheet)
            for i, row in enumerate(formulas.formulas):
                for j, text in enumerate(row):
                    where = (formulas.top + i, formulas.left + j)
                    grid[where] = formula_cell(text, formulas.array)
        for style in placements.formats:
            entry = self._own_sheet(style.sheet)
            code = style.code("excel")
            entry.formats.update({(r, c): code for r in range(style.top, style.bottom + 1) for c in range(style.left, style.right + 1)})
        for width in placements.widths:
            self._own_sheet(width.sheet).widths[width.column] = width.characters
        for placed in placements.names:
            for name in self.names:
                if not name.local and not name.dropped and name.name.casefold() == placed.name.casefold():
                    name.dropped = True
            self.names.append(NameEntry(placed.name, None, placed.reference))

    def _grid(self, title: str) -> Grid:
        entry = self.sheet(title)
        if entry.generated is not None:
            return entry.generated
        if not entry.is_worksheet:
            raise PackageError(f"'{entry.title}' is not a sheet of cells; name a range on a worksheet")
        return entry.inserted

    def _own_sheet(self, title: str) -> SheetEntry:
        entry = self.sheet(title)
        assert entry.generated is not None, title  # internal: formats and widths go only on sheets the placements create
        return entry

    def styles_part(self) -> str | None:
        """The workbook's styles part, when its relationships name one that exists."""
        found = [part for kind, part in self.rel_targets.values() if kind == REL_NS + "/styles"]
        return found[0] if found and self.package.has(found[0]) else None

    def _check_droppable(self, entry: SheetEntry) -> None:
        if entry.generated is not None or entry.original is None:
            return
        rels = _rels_path(entry.part)
        if not entry.is_worksheet or (self.package.has(rels) and _relationships(self.package.text(rels))):
            raise PackageError(
                f"the sheet '{entry.title}' holds pictures, charts or other parts sheetnet did not write, so sheetnet will not replace it; "
                "rename that sheet or choose another model name"
            )

    def _free_part(self) -> str:
        n = 1
        while f"xl/worksheets/sheet{n}.xml".casefold() in self.taken_parts:
            n += 1
        part = f"xl/worksheets/sheet{n}.xml"
        self.taken_parts.add(part.casefold())
        return part

    def _free_sheet_id(self) -> int:
        return max((e.sheet_id for e in self.sheets), default=0) + 1

    def _free_rel_id(self) -> str:
        n = 1
        while f"rId{n}" in self.taken_ids:
            n += 1
        self.taken_ids.add(f"rId{n}")
        return f"rId{n}"

    # -- writing the edited text --

    def edited_workbook(self) -> str:
        gone = [i for i, e in enumerate(self._original_sheets()) if e.dropped]
        text = self._replace_sheets()
        text = self._replace_names(text, gone)
        return self._fix_views(text, gone)

    def _original_sheets(self) -> list[SheetEntry]:
        return [e for e in self.sheets if e.original is not None]

    def _sheet_line(self, entry: SheetEntry) -> str:
        if entry.original is not None and entry.generated is None:
            return entry.original
        state = "" if entry.visibility == "visible" else f' state="{entry.visibility}"'
        return f'<{self.p}sheet name="{escape(entry.title, True)}" sheetId="{entry.sheet_id}"{state} {self.r}id="{entry.rel_id}"/>'

    def _replace_sheets(self) -> str:
        """The <sheets> list: the user's entries as they were, ours rebuilt in place or added at the end."""
        block = self._sheets_block()
        old_inner = block.group(2) or ""
        by_original = {e.original: e for e in self._original_sheets()}
        pieces, position = [], 0
        for match in element_pattern(self.p, "sheet").finditer(old_inner):
            pieces.append(old_inner[position:match.start()])
            position = match.end()
            entry = by_original.get(match.group(0))
            if entry is None or not entry.dropped:
                pieces.append(match.group(0) if entry is None else self._sheet_line(entry))
        pieces.append(old_inner[position:])
        pieces.extend(self._sheet_line(e) for e in self.sheets if e.original is None and not e.dropped)
        p = self.p
        return self.workbook[:block.start()] + f"<{p}sheets{block.group(1) or ''}>{''.join(pieces)}</{p}sheets>" + self.workbook[block.end():]

    def _replace_names(self, text: str, gone: list[int]) -> str:
        p = re.escape(self.p)
        block = re.search(rf"<{p}definedNames(\s[^>]*?)?(?:/>|>(.*?)</{p}definedNames\s*>)", text, re.DOTALL)
        originals = {n.original: n for n in self.names if n.original is not None}
        new = [n for n in self.names if n.original is None and not n.dropped]
        added = "".join(f'<{self.p}definedName name="{escape(n.name, True)}">{escape(n.reference)}</{self.p}definedName>' for n in new)
        if block is None:
            if not added:
                return text
            # definedNames follows sheets, functionGroups and externalReferences in the schema's order
            before = rf"</{p}sheets\s*>|<{p}functionGroups\b[^>]*/>|</{p}functionGroups\s*>|</{p}externalReferences\s*>"
            anchor = max(m.end() for m in re.finditer(before, text))
            return text[:anchor] + f"<{self.p}definedNames>{added}</{self.p}definedNames>" + text[anchor:]
        inner = block.group(2) or ""
        pieces, position = [], 0
        changed = bool(added)
        for match in element_pattern(self.p, "definedName").finditer(inner):
            entry = originals.get(match.group(0))
            pieces.append(inner[position:match.start()])
            position = match.end()
            keep = match.group(0)
            if entry is not None and entry.dropped:
                changed = True
                continue
            local = attributes(match.group("attrs") or "").get("localSheetId")
            if local is not None and local.isdigit() and gone:
                index = int(local)
                changed = True
                if index in gone:
                    continue  # a name local to a sheet that is gone goes with it
                shifted = index - sum(1 for g in gone if g < index)
                keep = re.sub(r"""localSheetId\s*=\s*("[^"]*"|'[^']*')""", f'localSheetId="{shifted}"', keep, count=1)
            pieces.append(keep)
        pieces.append(inner[position:])
        if not changed:
            return text
        body = "".join(pieces) + added
        if not element_pattern(self.p, "definedName").search(body):
            return text[:block.start()] + text[block.end():]
        return text[:block.start()] + f"<{self.p}definedNames{block.group(1) or ''}>{body}</{self.p}definedNames>" + text[block.end():]

    def _fix_views(self, text: str, gone: list[int]) -> str:
        if not gone:
            return text
        count = sum(1 for e in self.sheets if not e.dropped)

        def fix(match: re.Match[str]) -> str:
            tag = match.group(0)
            for name in ("activeTab", "firstSheet"):
                value = attributes(tag).get(name)
                if value is not None and value.isdigit():
                    index = int(value)
                    new = 0 if index in gone else index - sum(1 for g in gone if g < index)
                    new = min(new, max(count - 1, 0))
                    tag = re.sub(rf"""\b{name}\s*=\s*("[^"]*"|'[^']*')""", f'{name}="{new}"', tag, count=1)
            return tag

        return re.sub(rf"<{re.escape(self.p)}workbookView\b[^>]*>", fix, text)

    def edited_rels(self, drop_calc_chain: bool) -> str:
        text = self.rels
        live = {e.rel_id for e in self.sheets if not e.dropped}
        gone = {e.rel_id for e in self._original_sheets() if e.dropped} - live
        for match, values in reversed(_relationships(text)):
            if values.get("Id") in gone or (drop_calc_chain and values.get("Type") == CALC_CHAIN_REL):
                text = text[:match.start()] + text[match.end():]
        added = "".join(
            f'<Relationship Id="{e.rel_id}" Type="{WORKSHEET_REL}" Target="{escape(posixpath.relpath(e.part, posixpath.dirname(self.workbook_part)), True)}"/>'
            for e in self.sheets if e.original is None and not e.dropped
        )
        end = text.rfind("</")
        return text[:end] + added + text[end:]

    def edited_types(self, removed_parts: Iterable[str]) -> str:
        text = self.types
        removed = {"/" + part.casefold() for part in removed_parts}
        for match in reversed(list(re.finditer(r"<(?:[\w.-]+:)?Override\b[^>]*?/>", text))):
            if attributes(match.group(0)).get("PartName", "").casefold() in removed:
                text = text[:match.start()] + text[match.end():]
        added = "".join(
            f'<Override PartName="/{escape(e.part, True)}" ContentType="{WORKSHEET_TYPE}"/>'
            for e in self.sheets if e.original is None and not e.dropped
        )
        end = text.rfind("</")
        return text[:end] + added + text[end:]

    def calc_chain_part(self) -> str | None:
        for kind, part in self.rel_targets.values():
            if kind == CALC_CHAIN_REL and self.package.has(part):
                return part
        return None


def _calc_chain_sheet_ids(xml: str) -> set[int]:
    ids, current = set(), 0
    for match in re.finditer(r"<(?:[\w.-]+:)?c\b[^>]*>", xml):
        value = attributes(match.group(0)).get("i")
        if value is not None and value.isdigit():
            current = int(value)
        ids.add(current)
    return ids


def add_number_formats(xml: str, codes: Iterable[str], label: str) -> tuple[str, dict[str, int]]:
    """The styles part with a cell format (``<xf>``) appended to ``cellXfs`` for each format code, and
    the code's ``<numFmt>`` added unless it has one; returns the new text and each code's cell format index.
    Appending keeps every index the workbook's cells use; all else in the part is left as it was."""
    p = namespace_prefix(xml, MAIN_NS)
    if p is None:
        raise PackageError(f"the styles of {label} are not written the usual way, so sheetnet cannot add number formats; {RESAVE}")
    q = re.escape(p)
    formats = re.search(rf"<{q}numFmts(\s[^>]*?)?(?:/>|>(.*?)</{q}numFmts\s*>)", xml, re.DOTALL)
    existing = {} if formats is None else {
        unescape(a.get("formatCode", "")): int(a["numFmtId"])
        for a in (attributes(m.group("attrs") or "") for m in element_pattern(p, "numFmt").finditer(formats.group(2) or ""))
        if a.get("numFmtId", "").isdigit()
    }
    next_id = max([163, *existing.values()]) + 1  # 164 is the first id of a workbook's own formats
    added = []
    ids: dict[str, int] = {}
    for code in codes:
        if code not in existing:
            existing[code] = next_id
            added.append(f'<{p}numFmt numFmtId="{next_id}" formatCode="{escape(code, quote=True)}"/>')
            next_id += 1
        ids[code] = existing[code]
    cell_formats = re.search(rf"<{q}cellXfs(\s[^>]*?)?(?:/>|>(.*?)</{q}cellXfs\s*>)", xml, re.DOTALL)
    if cell_formats is None:
        raise PackageError(f"the styles of {label} list no cell formats, so they are damaged; {RESAVE}")
    count = len(element_pattern(p, "xf").findall(cell_formats.group(2) or ""))
    index = {code: count + i for i, code in enumerate(ids)}
    new_xfs = "".join(f'<{p}xf numFmtId="{ids[code]}" fontId="0" fillId="0" borderId="0" xfId="0" applyNumberFormat="1"/>' for code in ids)
    xfs = f'<{p}cellXfs count="{count + len(ids)}">{cell_formats.group(2) or ""}{new_xfs}</{p}cellXfs>'
    xml = xml[:cell_formats.start()] + xfs + xml[cell_formats.end():]
    if added:
        if formats is not None:
            total = len(element_pattern(p, "numFmt").findall(formats.group(2) or "")) + len(added)
            xml = xml[:formats.start()] + f'<{p}numFmts count="{total}">{formats.group(2) or ""}{"".join(added)}</{p}numFmts>' + xml[formats.end():]
        else:
            sheet = re.search(rf"<{q}styleSheet(\s[^>]*?)?>", xml)
            if sheet is None:
                raise PackageError(f"the styles of {label} are damaged; {RESAVE}")
            xml = xml[:sheet.end()] + f'<{p}numFmts count="{len(added)}">{"".join(added)}</{p}numFmts>' + xml[sheet.end():]
    return xml, index


def write_package(package: Package, parts: Iterable[Placements], out: BinaryIO) -> list[str]:
    """Apply ``parts`` in order and write the new package to ``out``; returns the parts sheetnet wrote or removed.

    Every other part is copied with the same name, content, compression and date."""
    book = WorkbookParts(package)
    for placements in parts:
        book.apply(placements)
    replaced: dict[str, bytes] = {}
    removed: set[str] = set()
    touched_ids: set[int] = set()
    codes = sorted({code for entry in book.sheets if not entry.dropped and entry.generated is not None for code in entry.formats.values()})
    style_index: dict[str, int] = {}
    styles = book.styles_part() if codes else None
    if styles is not None:  # a workbook without a styles part keeps its numbers in the default format
        text, style_index = add_number_formats(package.text(styles), codes, package.label)
        replaced[styles] = text.encode("utf-8")
    for entry in book.sheets:
        if entry.original is not None and (entry.dropped or entry.generated is not None):
            touched_ids.add(entry.sheet_id)
        if entry.dropped:
            if entry.original is not None and not any(e is not entry and not e.dropped and e.part == entry.part for e in book.sheets):
                removed.add(entry.part)
                removed.add(_rels_path(entry.part))
            continue
        if entry.generated is not None:
            cell_styles = {where: style_index[code] for where, code in entry.formats.items() if code in style_index and where in entry.generated}
            replaced[entry.part] = worksheet_xml(entry.generated, cell_styles, entry.widths)
            if entry.original is not None:
                removed.add(_rels_path(entry.part))
        elif entry.inserted:
            replaced[entry.part] = insert_cells(package.text(entry.part), entry.inserted, entry.title).encode("utf-8")
    chain = book.calc_chain_part()
    drop_chain = chain is not None and bool(touched_ids & _calc_chain_sheet_ids(package.text(chain)))
    if drop_chain and chain is not None:
        removed.add(chain)
    removed = {part for part in removed if package.has(part) and part not in replaced}
    replaced[book.workbook_part] = book.edited_workbook().encode("utf-8")
    replaced[book.rels_part] = book.edited_rels(drop_chain).encode("utf-8")
    replaced["[Content_Types].xml"] = book.edited_types(removed).encode("utf-8")
    changed = sorted(set(replaced) | removed)
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED, allowZip64=True) as target:
        for info in package.infos:
            if info.filename in removed:
                continue
            copy = zipfile.ZipInfo(info.filename, info.date_time)
            copy.compress_type = info.compress_type
            copy.external_attr = info.external_attr
            copy.create_system = info.create_system
            copy.comment = info.comment
            data = replaced.pop(info.filename) if info.filename in replaced else package.read(info.filename)
            target.writestr(copy, data)
        for part, data in replaced.items():  # sheets sheetnet adds
            new = zipfile.ZipInfo(part, (1980, 1, 1, 0, 0, 0))
            new.compress_type = zipfile.ZIP_DEFLATED
            target.writestr(new, data)
    return changed
