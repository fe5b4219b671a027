"""Build tests/data/rich.xlsm: a workbook holding what a save must never lose (run by hand, output committed).

    .venv/bin/python tests/data/make_rich_workbook.py

1. openpyxl lays out an invented table (sheetnet_demo's coffee lots), formulas, a bar chart,
   a picture, a data validation and a data-bar conditional format;
2. LibreOffice Calc (through UNO, run by /usr/bin/python3) calculates it, so the formulas carry
   cached results, adds a pivot table on a sheet of its own, and saves it as .xlsx;
3. zipfile adds a custom XML part, a web extension, printer settings, sparklines (an x14 extension), an
   mc:Ignorable list on the workbook part and a VBA project part, making it an .xlsm. (LibreOffice
   writes the data bar as the newer x14 kind of conditional format; where it does not, an x14 icon set is added.)
The parts are crafted where no free program writes them; none of them is evaluated by sheetnet.
"""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
import tempfile
import zipfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
OUTPUT = HERE / "rich.xlsm"
ROWS = 60
OFFICE_TYPES = "application/vnd.openxmlformats-officedocument"
RELATIONSHIPS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"


def build_base(path: Path) -> None:
    import openpyxl
    import sheetnet_demo
    from openpyxl.chart import BarChart, Reference
    from openpyxl.drawing.image import Image
    from openpyxl.formatting.rule import DataBarRule
    from openpyxl.worksheet.datavalidation import DataValidation
    from PIL import Image as Picture

    table = sheetnet_demo.coffee_lot_grades(rows=ROWS, seed=8)
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "Lots"
    sheet.append(list(table.columns))
    for row in table.itertuples(index=False):
        sheet.append(list(row))
    sheet["J1"] = "total of B"
    sheet["J2"] = f"=SUM(B2:B{ROWS + 1})"
    sheet["J3"] = "=J2*2"
    sheet["K2"] = "keep me"
    checks = DataValidation(type="list", formula1='"A,B,C"', allow_blank=True)
    sheet.add_data_validation(checks)
    checks.add(f"G2:G{ROWS + 1}")
    sheet.conditional_formatting.add(f"B2:B{ROWS + 1}", DataBarRule(start_type="min", end_type="max", color="FF638EC6"))
    bars = BarChart()
    bars.add_data(Reference(sheet, min_col=2, min_row=1, max_row=11), titles_from_data=True)
    sheet.add_chart(bars, "M2")
    picture = io.BytesIO()
    Picture.new("RGB", (24, 16), (40, 120, 200)).save(picture, format="PNG")
    picture.seek(0)
    sheet.add_image(Image(picture), "M20")
    notes = book.create_sheet("Notes")
    notes["A1"] = "the analyst's own sheet"
    book.save(path)


OFFICE_SCRIPT = r'''
import socket, subprocess, sys, time
from pathlib import Path
import uno
from com.sun.star.beans import PropertyValue
from com.sun.star.table import CellAddress, CellRangeAddress

source, target, profile = sys.argv[1:4]
with socket.socket() as probe:
    probe.bind(("127.0.0.1", 0))
    port = probe.getsockname()[1]
command = ["/usr/lib/libreoffice/program/soffice.bin", "--headless", "--invisible", "--norestore", "--nodefault", "--nologo",
           "--nolockcheck", f"-env:UserInstallation={Path(profile).as_uri()}", f"--accept=socket,host=127.0.0.1,port={port};urp;"]
office = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
local = uno.getComponentContext()
resolver = local.ServiceManager.createInstanceWithContext("com.sun.star.bridge.UnoUrlResolver", local)
deadline = time.monotonic() + 90
while True:
    try:
        context = resolver.resolve(f"uno:socket,host=127.0.0.1,port={port};urp;StarOffice.ComponentContext")
        break
    except Exception:
        if office.poll() == 81:
            office = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        elif time.monotonic() > deadline or office.poll() is not None:
            raise
        time.sleep(0.25)
desktop = context.ServiceManager.createInstanceWithContext("com.sun.star.frame.Desktop", context)
doc = desktop.loadComponentFromURL(Path(source).as_uri(), "_blank", 0, (PropertyValue(Name="Hidden", Value=True),))
doc.calculateAll()
sheets = doc.Sheets
sheets.insertNewByName("Pivot", sheets.getCount())
pivot_sheet = sheets.getByName("Pivot")
tables = pivot_sheet.getDataPilotTables()
descriptor = tables.createDataPilotDescriptor()
area = CellRangeAddress(Sheet=0, StartColumn=0, StartRow=0, EndColumn=6, EndRow=int(sys.argv[4]))
descriptor.setSourceRange(area)
fields = descriptor.getDataPilotFields()
from com.sun.star.sheet.DataPilotFieldOrientation import ROW, DATA
from com.sun.star.sheet.GeneralFunction import SUM
names = [fields.getByIndex(i).Name for i in range(fields.getCount())]
grade = fields.getByIndex(names.index("grade"))
grade.Orientation = ROW
measure = fields.getByIndex(1)
measure.Orientation = DATA
measure.Function = SUM
tables.insertNewByName("grades pivot", CellAddress(Sheet=sheets.getCount() - 1, Column=0, Row=0), descriptor)
doc.calculateAll()
doc.storeToURL(Path(target).as_uri(), (PropertyValue(Name="FilterName", Value="Calc MS Excel 2007 XML"), PropertyValue(Name="Overwrite", Value=True)))
doc.close(True)
try:
    desktop.terminate()
except Exception:
    pass
office.wait(60)
'''

X14_CONDITIONAL = (
    '<extLst><ext uri="{78C0D931-6437-407d-A8EE-F0AAD7539E65}" '
    'xmlns:x14="http://schemas.microsoft.com/office/spreadsheetml/2009/9/main">'
    '<x14:conditionalFormattings><x14:conditionalFormatting xmlns:xm="http://schemas.microsoft.com/office/excel/2006/main">'
    '<x14:cfRule type="iconSet" priority="9" id="{1F6B8A62-6E43-4C5E-9E55-0D4C2B8E7A11}"><x14:iconSet iconSet="3Triangles">'
    '<x14:cfvo type="percent"><xm:f>0</xm:f></x14:cfvo><x14:cfvo type="percent"><xm:f>33</xm:f></x14:cfvo>'
    '<x14:cfvo type="percent"><xm:f>67</xm:f></x14:cfvo></x14:iconSet></x14:cfRule>'
    '<xm:sqref>C2:C61</xm:sqref></x14:conditionalFormatting></x14:conditionalFormattings></ext></extLst>'
)
CUSTOM_XML = b'<?xml version="1.0" encoding="UTF-8" standalone="no"?>\n<lotNotes xmlns="urn:example:lot-notes"><reviewer>analyst 7</reviewer></lotNotes>'
CUSTOM_PROPS = (
    b'<?xml version="1.0" encoding="UTF-8" standalone="no"?>\n<ds:datastoreItem ds:itemID="{6E1B7C1A-2B1F-4C8D-9A51-3C2E8D0F4A77}" '
    b'xmlns:ds="http://schemas.openxmlformats.org/officeDocument/2006/customXml"><ds:schemaRefs/></ds:datastoreItem>'
)
CUSTOM_RELS = (
    b'<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n<Relationships xmlns="http://schemas.openxmlformats.org/package/2006/relationships">'
    b'<Relationship Id="rId1" Type="http://schemas.openxmlformats.org/officeDocument/2006/relationships/customXmlProps" Target="itemProps1.xml"/>'
    b"</Relationships>"
)
SPARKLINES = (
    '<ext uri="{05C60535-1F16-4fd2-B633-F4F36F0B64E0}" xmlns:x14="http://schemas.microsoft.com/office/spreadsheetml/2009/9/main">'
    '<x14:sparklineGroups xmlns:xm="http://schemas.microsoft.com/office/excel/2006/main"><x14:sparklineGroup displayEmptyCellsAs="gap">'
    '<x14:colorSeries rgb="FF376092"/><x14:sparklines><x14:sparkline><xm:f>Lots!B2:F2</xm:f><xm:sqref>L2</xm:sqref></x14:sparkline>'
    "</x14:sparklines></x14:sparklineGroup></x14:sparklineGroups></ext>"
)
WORKBOOK_ROOT = (
    '<workbook xmlns:mc="http://schemas.openxmlformats.org/markup-compatibility/2006" mc:Ignorable="x15" '
    'xmlns:x15="http://schemas.microsoft.com/office/spreadsheetml/2010/11/main" '
)
WEB_EXTENSION = (
    b'<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    b'<we:webextension xmlns:we="http://schemas.microsoft.com/office/webextensions/webextension/2010/11" '
    b'id="{3C1E5E0A-7B5D-4F4B-9A7E-2D6C1B0A9F10}"><we:reference id="wa000000000" version="1.0.0.0" store="en-US" storeType="OMEX"/>'
    b"<we:alternateReferences/><we:properties/><we:bindings/><we:snapshot/></we:webextension>"
)
PRINTER_SETTINGS = bytes(range(256)) * 2
VBA_PROJECT = b"stand-in VBA project bytes: sheetnet must carry them, never run them" * 8


def finish(converted: Path, output: Path) -> None:
    """Add the crafted parts and make the file an .xlsm."""
    with zipfile.ZipFile(converted) as source, zipfile.ZipFile(output, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            data = source.read(info.filename)
            if info.filename == "[Content_Types].xml":
                text = data.decode()
                text = text.replace(f"{OFFICE_TYPES}.spreadsheetml.sheet.main+xml", "application/vnd.ms-excel.sheet.macroEnabled.main+xml")
                text = text.replace(
                    "</Types>",
                    '<Default Extension="bin" ContentType="application/vnd.ms-office.vbaProject"/>'
                    f'<Override PartName="/xl/printerSettings/printerSettings1.bin" ContentType="{OFFICE_TYPES}.spreadsheetml.printerSettings"/>'
                    '<Override PartName="/xl/webextensions/webextension1.xml" ContentType="application/vnd.ms-office.webextension+xml"/>'
                    f'<Override PartName="/customXml/itemProps1.xml" ContentType="{OFFICE_TYPES}.customXmlProperties+xml"/></Types>',
                )
                data = text.encode()
            elif info.filename == "xl/workbook.xml":
                data = data.decode().replace("<workbook ", WORKBOOK_ROOT, 1).encode()
            elif info.filename == "xl/worksheets/_rels/sheet1.xml.rels":
                data = data.decode().replace(
                    "</Relationships>",
                    '<Relationship Id="rIdPrint" Type="http://schemas.openxmlformats.org/officeDocument/2006/relationships/printerSettings" '
                    'Target="../printerSettings/printerSettings1.bin"/></Relationships>',
                ).encode()
            elif info.filename == "_rels/.rels":
                data = data.decode().replace(
                    "</Relationships>",
                    '<Relationship Id="rIdWeb" Type="http://schemas.microsoft.com/office/2011/relationships/webextension" '
                    'Target="xl/webextensions/webextension1.xml"/></Relationships>',
                ).encode()
            elif info.filename == "xl/_rels/workbook.xml.rels":
                data = data.decode().replace(
                    "</Relationships>",
                    '<Relationship Id="rIdVba" Type="http://schemas.microsoft.com/office/2006/relationships/vbaProject" Target="vbaProject.bin"/>'
                    f'<Relationship Id="rIdCustom" Type="{RELATIONSHIPS}/customXml" Target="../customXml/item1.xml"/>'
                    "</Relationships>",
                ).encode()
            elif info.filename == "xl/worksheets/sheet1.xml":
                text = data.decode()
                if "x14:conditionalFormattings" not in text:  # LibreOffice writes its data bars that way; else add one
                    assert "<extLst>" not in text, "LibreOffice wrote another extension list; merge by hand"
                    text = text.replace("</worksheet>", X14_CONDITIONAL + "</worksheet>")
                data = text[:text.rindex("</extLst>")].encode() + SPARKLINES.encode() + text[text.rindex("</extLst>"):].encode()
            target.writestr(info, data)
        target.writestr("xl/vbaProject.bin", VBA_PROJECT)
        target.writestr("xl/printerSettings/printerSettings1.bin", PRINTER_SETTINGS)
        target.writestr("xl/webextensions/webextension1.xml", WEB_EXTENSION)
        target.writestr("customXml/item1.xml", CUSTOM_XML)
        target.writestr("customXml/itemProps1.xml", CUSTOM_PROPS)
        target.writestr("customXml/_rels/item1.xml.rels", CUSTOM_RELS)


def main() -> None:
    with tempfile.TemporaryDirectory(prefix="sheetnet-rich-") as scratch:
        folder = Path(scratch)
        base, converted = folder / "base.xlsx", folder / "converted.xlsx"
        build_base(base)
        script = folder / "office.py"
        script.write_text(OFFICE_SCRIPT)
        environment = dict(os.environ, HOME=scratch, TMPDIR=scratch)
        environment.pop("PYTHONPATH", None)
        done = subprocess.run(["/usr/bin/python3", str(script), str(base), str(converted), str(folder / "profile"), str(ROWS)],
                              env=environment, capture_output=True, text=True, timeout=300)
        if done.returncode != 0 or not converted.exists():
            sys.exit(f"LibreOffice step failed: {done.stderr[-2000:]}")
        finish(converted, OUTPUT)
    with zipfile.ZipFile(OUTPUT) as made:
        print(json.dumps(sorted(made.namelist()), indent=1))
    print(f"wrote {OUTPUT} ({OUTPUT.stat().st_size:,} bytes)")


if __name__ == "__main__":
    main()
