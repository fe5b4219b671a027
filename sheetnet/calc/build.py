"""The Calc extension, generated from the one registry: IDL, function table, configuration, the .oxt.

Calc names an add-in function ``<service name>.<METHOD>``; the service name is ``SHEETNET`` and each
method is the registry name's last part in lower case, so cells read ``=SHEETNET.PREDICT(...)``
exactly as with the Office add-in. Every argument is ``any`` (see `idl_type`); every answer is
``sequence< sequence< any > >``, the only return type Calc shows as a 2-D array.

No CalcAddIns.xcu: with one, Calc 7.4 lists the functions from the configuration without loading
the component and then never shows their arguments in the function wizard (it fills argument
information only from a loaded component, and builds its function list once). Without it, Calc
loads the component when it starts and takes every name and help text from its `XAddIn` methods.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import tempfile
import zipfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable
from xml.sax.saxutils import escape, quoteattr

from .. import __version__
from ..cells import MARKER
from ..registry import REGISTRY, Argument, CellFunction
from ..service import DEFAULT_HOLDOUT

HERE = Path(__file__).parent
COMPONENT_SOURCE = HERE / "sheetnet_calc.py"
SHIPPED_RDB = HERE / "sheetnet.rdb"
SERVICE_NAME = "SHEETNET"
IDL_MODULE = "sheetnetcalc"  # a UNO module name no Python package has, so LibreOffice's import finds the type
INTERFACE = "XCellFunctions"
FUNCTIONS_IMPLEMENTATION = "sheetnet.calc.CellFunctions"
COMMAND_IMPLEMENTATION = "sheetnet.calc.StoreCommand"
COMMAND_PROTOCOL = "vnd.sheetnet.calc:"
STORE_COMMAND = COMMAND_PROTOCOL + "store"
EXTENSION_ID = "sheetnet.calc.functions"
CATEGORY = "Add-In"
SDK_BIN = Path("/usr/lib/libreoffice/sdk/bin")
OFFICE_PROGRAM = Path("/usr/lib/libreoffice/program")
RANGE_TYPE = "sequence< sequence< any > >"
TIMEOUTS = {"SHEETNET.TRAIN": 120.0, "default": 30.0}  # seconds a cell waits for the server before it shows a message


@dataclass(frozen=True)
class InstallSettings:
    """What the installing user chose; written into the extension's function table."""

    interpreter: str | None = None  # the Python that may start `sheetnet serve` when none answers; None: never start one
    timeouts: tuple[tuple[str, float], ...] = tuple(TIMEOUTS.items())


DEFAULT_SETTINGS = InstallSettings()


def method_name(entry: CellFunction) -> str:
    """SHEETNET.PREDICT -> predict."""
    prefix, _, last = entry.name.partition(".")
    if prefix != SERVICE_NAME or not last.isalpha():
        raise ValueError(f"{entry.name}: Calc needs names like {SERVICE_NAME}.NAME")
    return last.lower()


def idl_name(argument: Argument) -> str:
    """UNO identifiers have no underscores: holdout_share -> holdoutShare."""
    first, *rest = argument.name.split("_")
    return first + "".join(part.capitalize() for part in rest)


def idl_type(argument: Argument) -> str:
    """Every argument is ``any``: Calc hands a range to an ``any`` with its #N/A cells as blanks (voids),
    where a range-typed argument refuses the whole call (Err:504), and the #N/A padding of an array
    formula larger than its answer (a model block's area) must not break the functions reading it."""
    return "any"


def interface_idl(registry: Iterable[CellFunction] = REGISTRY) -> str:
    """The IDL of the cell-function interface, one method per registry entry."""
    methods = []
    for entry in registry:
        parameters = ", ".join(f"[in] {idl_type(a)} {idl_name(a)}" for a in entry.arguments)
        methods.append(f"    {RANGE_TYPE} {method_name(entry)}({parameters});")
    guard = f"__{IDL_MODULE}_{INTERFACE}_idl__"
    return "\n".join([
        "// generated from sheetnet.registry by sheetnet.calc.build; do not edit",
        f"#ifndef {guard}",
        f"#define {guard}",
        "#include <com/sun/star/uno/XInterface.idl>",
        f"module {IDL_MODULE} {{",
        f"interface {INTERFACE} : com::sun::star::uno::XInterface",
        "{",
        *methods,
        "};",
        "};",
        "#endif",
        "",
    ])


def sdk_tool(name: str = "unoidl-write") -> Path | None:
    found = shutil.which(name)
    if found:
        return Path(found)
    candidate = SDK_BIN / name
    return candidate if candidate.exists() else None


def build_rdb(out: Path, registry: Iterable[CellFunction] = REGISTRY) -> Path:
    """Compile the IDL into a type library with the SDK's unoidl-write (apt-get install libreoffice-dev)."""
    tool = sdk_tool()
    if tool is None:
        raise FileNotFoundError(f"unoidl-write was not found on PATH or in {SDK_BIN}; install the LibreOffice SDK (apt-get install libreoffice-dev)")
    with tempfile.TemporaryDirectory(prefix="sheetnet-idl-") as scratch:
        source = Path(scratch, IDL_MODULE, f"{INTERFACE}.idl")
        source.parent.mkdir(parents=True)
        source.write_text(interface_idl(registry), encoding="utf-8")
        office_types = [OFFICE_PROGRAM / "types.rdb", OFFICE_PROGRAM / "types" / "offapi.rdb"]
        done = subprocess.run([str(tool), *map(str, office_types), scratch, str(out)], capture_output=True, text=True, timeout=120)
    if done.returncode != 0:
        raise RuntimeError(f"unoidl-write failed: {done.stdout} {done.stderr}")
    return out


def function_table(settings: InstallSettings = DEFAULT_SETTINGS, registry: Iterable[CellFunction] = REGISTRY) -> dict[str, Any]:
    """What the component reads at run time (it imports no sheetnet code)."""
    return {
        "version": __version__,
        "service": SERVICE_NAME,
        "implementation": FUNCTIONS_IMPLEMENTATION,
        "category": CATEGORY,
        "marker": MARKER,
        "interpreter": settings.interpreter,
        "holdout": DEFAULT_HOLDOUT,  # the store command's default share held out, as at every door
        "timeouts": dict(settings.timeouts),
        "functions": [
            {
                "name": entry.name,
                "method": method_name(entry),
                "help": entry.help,
                "returns": entry.returns,
                "arguments": [
                    {"name": a.name, "idl_name": idl_name(a), "help": a.help, "optional": a.optional, "kind": a.kind} for a in entry.arguments
                ],
            }
            for entry in registry
        ],
    }


def _value(text: str, lang: bool = True) -> str:
    language = ' xml:lang="en-US"' if lang else ""
    return f"<value{language}>{escape(text)}</value>"


def _prop(name: str, text: str, lang: bool = True) -> str:
    return f'<prop oor:name="{name}" oor:type="xs:string">{_value(text, lang)}</prop>'


CONFIG_HEAD = ('<?xml version="1.0" encoding="UTF-8"?>\n'
               '<oor:component-data xmlns:oor="http://openoffice.org/2001/registry" xmlns:xs="http://www.w3.org/2001/XMLSchema" '
               'oor:name="{name}" oor:package="org.openoffice.Office">\n')


STORE_TITLE = "sheetnet: store a model from the selected table"


def addons_xcu() -> str:
    """The menu entry (Tools > Add-Ons) and a toolbar button for the store command, in Calc only."""
    def entry(node: str) -> str:
        return (f'<node oor:name="{node}" oor:op="replace">'
                f'<prop oor:name="URL" oor:type="xs:string"><value>{STORE_COMMAND}</value></prop>'
                f'{_prop("Title", STORE_TITLE)}'
                '<prop oor:name="Target" oor:type="xs:string"><value>_self</value></prop>'
                '<prop oor:name="Context" oor:type="xs:string"><value>com.sun.star.sheet.SpreadsheetDocument</value></prop></node>')

    return (CONFIG_HEAD.format(name="Addons") + '<node oor:name="AddonUI">'
            f'<node oor:name="AddonMenu">{entry("sheetnet.calc.store")}</node>'
            f'<node oor:name="OfficeToolBar"><node oor:name="sheetnet.calc.toolbar" oor:op="replace">{entry("m1")}</node></node>'
            "</node>\n</oor:component-data>\n")


def protocol_handler_xcu() -> str:
    return (CONFIG_HEAD.format(name="ProtocolHandler") + '<node oor:name="HandlerSet">'
            f'<node oor:name="{COMMAND_IMPLEMENTATION}" oor:op="replace">'
            f'<prop oor:name="Protocols" oor:type="oor:string-list"><value>{COMMAND_PROTOCOL}*</value></prop></node>'
            "</node>\n</oor:component-data>\n")


def components_xml() -> str:
    """Passive registration: unopkg reads this instead of importing the Python file at install time."""
    return ('<?xml version="1.0" encoding="UTF-8"?>\n<components xmlns="http://openoffice.org/2010/uno-components">\n'
            f'<component loader="com.sun.star.loader.Python" uri="{COMPONENT_SOURCE.name}">\n'
            f'<implementation name="{FUNCTIONS_IMPLEMENTATION}"><service name="{SERVICE_NAME}"/><service name="com.sun.star.sheet.AddIn"/></implementation>\n'
            f'<implementation name="{COMMAND_IMPLEMENTATION}"><service name="com.sun.star.frame.ProtocolHandler"/></implementation>\n'
            "</component>\n</components>\n")


MEDIA_TYPES = {
    "sheetnet.rdb": "application/vnd.sun.star.uno-typelibrary;type=RDB",
    "sheetnet.components": "application/vnd.sun.star.uno-components",
    "Addons.xcu": "application/vnd.sun.star.configuration-data",
    "ProtocolHandler.xcu": "application/vnd.sun.star.configuration-data",
}


def manifest_xml() -> str:
    entries = "".join(f'<manifest:file-entry manifest:media-type={quoteattr(kind)} manifest:full-path="{path}"/>\n' for path, kind in MEDIA_TYPES.items())
    return ('<?xml version="1.0" encoding="UTF-8"?>\n'
            '<manifest:manifest xmlns:manifest="http://openoffice.org/2001/manifest">\n' + entries + "</manifest:manifest>\n")


def description_xml() -> str:
    version = re.sub(r"[^0-9.]", "", __version__) or "0"
    return ('<?xml version="1.0" encoding="UTF-8"?>\n'
            '<description xmlns="http://openoffice.org/extensions/description/2006" xmlns:xlink="http://www.w3.org/1999/xlink">\n'
            f'<identifier value="{EXTENSION_ID}"/>\n<version value="{version}"/>\n'
            '<display-name><name lang="en-US">sheetnet cell functions</name></display-name>\n'
            "</description>\n")


def extension_files(settings: InstallSettings = DEFAULT_SETTINGS, rdb: Path = SHIPPED_RDB) -> dict[str, bytes]:
    """Every file of the .oxt by its path inside it."""
    texts = {
        "META-INF/manifest.xml": manifest_xml(),
        "description.xml": description_xml(),
        "sheetnet.components": components_xml(),
        "Addons.xcu": addons_xcu(),
        "ProtocolHandler.xcu": protocol_handler_xcu(),
        "sheetnet_calc.json": json.dumps(function_table(settings), indent=1),
    }
    files = {path: text.encode("utf-8") for path, text in texts.items()}
    files[COMPONENT_SOURCE.name] = COMPONENT_SOURCE.read_bytes()
    files["sheetnet.rdb"] = rdb.read_bytes()
    return files


def build_extension(out: Path, settings: InstallSettings = DEFAULT_SETTINGS, rdb: Path = SHIPPED_RDB) -> Path:
    """Write the .oxt (a zip); returns its path."""
    out.parent.mkdir(parents=True, exist_ok=True)
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as archive:
        for path, data in extension_files(settings, rdb).items():
            archive.writestr(path, data)
    return out
