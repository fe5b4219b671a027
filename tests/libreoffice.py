"""Run LibreOffice Calc headless to recalculate workbooks (used by tests and benchmarks)."""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

SOFFICE = shutil.which("soffice") or shutil.which("libreoffice")
MISSING = "LibreOffice Calc is not installed (apt-get install libreoffice-calc-nogui), so native formulas were not recalculated in a real spreadsheet engine"


def recalculate(books: list[Path], out: Path, timeout: float = 600) -> list[Path]:
    """Open each workbook in LibreOffice, let it compute every formula, save copies into ``out``.

    One office start for all the books; a fresh profile each call; HOME and TMPDIR in a temporary folder.
    """
    if SOFFICE is None:
        raise RuntimeError(MISSING)
    out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="sheetnet-lo-") as scratch:
        environment = dict(os.environ, HOME=scratch, TMPDIR=scratch)
        profile = Path(scratch, "profile").as_uri()
        command = [SOFFICE, "--headless", "--norestore", f"-env:UserInstallation={profile}", "--convert-to", "xlsx", "--outdir", str(out), *map(str, books)]
        done = subprocess.run(command, env=environment, capture_output=True, text=True, timeout=timeout)
    converted = [out / book.name for book in books]
    missing = [p.name for p in converted if not p.exists()]
    if done.returncode != 0 or missing:
        raise RuntimeError(f"LibreOffice did not convert {missing or books}: {done.stdout} {done.stderr}")
    return converted
