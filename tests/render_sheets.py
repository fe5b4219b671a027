"""Workbook sheets rendered by LibreOffice headless to PNG pictures, to look at how sheetnet's sheets show.

Two sides, as in `calc_office.py`: imported (by the tests or `render_demo.py`), `render` runs this
file with ``/usr/bin/python3`` (UNO's bridge exists only there), which loads the workbook in a headless
office of its own (a fresh profile, its own HOME), gives each region one page exactly its size (no
header or footer, the grid and the column letters and row numbers printed, as on screen), exports
that page to PDF and lets ``pdftoppm`` (poppler-utils) turn it into a PNG. Charts anchored in a
region are drawn with it.

    python tests/render_sheets.py BOOK.xlsx OUT_FOLDER "sn card grades!A1:C70" ["Data!A1:H30" ...]
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
SYSTEM_PYTHON = Path("/usr/bin/python3")
MARGIN = 400  # 1/100 mm around each region


def render_missing() -> str | None:
    """Why sheets cannot be rendered here, or None."""
    sys.path.insert(0, str(HERE))
    from calc_office import office_missing

    missing = office_missing()
    if missing is None and shutil.which("pdftoppm") is None:
        missing = "pdftoppm is not installed (apt-get install poppler-utils)"
    return missing


def file_name(region: str) -> str:
    """A region as a file name: 'sn card grades!A1:C70' -> 'sn-card-grades_A1-C70'."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "-", region.replace("!", "_")).strip("-")


def render(book: Path, regions: list[str], out: Path, dpi: int = 60, timeout: float = 240) -> list[Path]:
    """One PNG per region (``'Sheet name!A1:H40'``) of ``book``, in ``out``; returns their paths in order."""
    out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="sheetnet-render-") as scratch:
        home = Path(scratch)
        env = dict(os.environ, HOME=str(home), TMPDIR=str(home))
        env.pop("PYTHONPATH", None)
        copy = home / ("book" + Path(book).suffix)  # a copy: the office's lock file never lands beside the user's book
        shutil.copyfile(book, copy)
        done = subprocess.run(
            [str(SYSTEM_PYTHON), __file__, "--office", str(home / "profile"), str(copy), json.dumps(regions), str(home)],
            capture_output=True, text=True, timeout=timeout, env=env,
        )
        if done.returncode != 0:
            raise RuntimeError(f"LibreOffice could not render {book}: {done.stderr[-2000:]}")
        pictures = []
        for region in regions:
            name = file_name(region)
            target = out / f"{name}.png"
            subprocess.run(["pdftoppm", "-png", "-singlefile", "-r", str(dpi), str(home / f"{name}.pdf"), str(out / name)],
                           check=True, capture_output=True, timeout=60)
            pictures.append(target)
        return pictures


# --- the office side (runs in /usr/bin/python3 with uno) -----------------------------------------------

def _export(profile: str, book: str, regions: list[str], folder: str) -> None:
    sys.path.insert(0, str(HERE))
    import uno
    from calc_office import Driver

    driver = Driver(profile, [])
    try:
        doc = None
        for _ in range(40):  # a fresh profile's office may still be settling after its first restart
            doc = driver.desktop.loadComponentFromURL(Path(book).as_uri(), "_blank", 0, driver._props(Hidden=True, ReadOnly=True))
            if doc is not None:
                break
            time.sleep(0.25)
        if doc is None:
            raise RuntimeError(f"LibreOffice did not open {book}")
        styles = doc.StyleFamilies.getByName("PageStyles")
        for number, region in enumerate(regions):
            title, cells = region.rsplit("!", 1)
            sheet = doc.Sheets.getByName(title)
            area = sheet.getCellRangeByName(cells)
            style = doc.createInstance("com.sun.star.style.PageStyle")
            styles.insertByName(f"sheetnet render {number}", style)
            size = area.Size
            style.Width, style.Height = size.Width + 2 * MARGIN + 1200, size.Height + 2 * MARGIN + 600  # room for the letters and numbers
            style.LeftMargin = style.RightMargin = style.TopMargin = style.BottomMargin = MARGIN
            style.HeaderIsOn = style.FooterIsOn = False
            style.PrintGrid = style.PrintHeaders = True
            style.ScaleToPagesX, style.ScaleToPagesY = 1, 1
            sheet.PageStyle = f"sheetnet render {number}"
            data = uno.Any("[]com.sun.star.beans.PropertyValue", driver._props(Selection=area))
            target = Path(folder, f"{file_name(region)}.pdf").as_uri()
            uno.invoke(doc, "storeToURL", (target, driver._props(FilterName="calc_pdf_Export", FilterData=data)))
        doc.close(True)
    finally:
        driver.op_quit()


def main(argv: list[str]) -> int:
    if argv[:1] == ["--office"]:
        _export(argv[1], argv[2], json.loads(argv[3]), argv[4])
        return 0
    if len(argv) < 3:
        print(__doc__.strip().splitlines()[-1].strip(), file=sys.stderr)
        return 2
    missing = render_missing()
    if missing:
        print(f"cannot render: {missing}", file=sys.stderr)
        return 1
    for picture in render(Path(argv[0]), argv[2:], Path(argv[1])):
        print(picture)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
