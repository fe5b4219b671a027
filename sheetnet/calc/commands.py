"""``sheetnet calc build / install / remove``: the Calc extension into a LibreOffice profile.

A normal user installs into their own LibreOffice profile (``unopkg add``). unopkg refuses
per-user installs as root, so as root the extension goes in as a shared one: into the office
for everyone, or, with ``--profile``, into a cache beside that profile, which the office must
then be started with (the command prints the ``-env:`` setting).
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
from pathlib import Path
from typing import TextIO

from ..errors import SheetnetError
from .build import DEFAULT_SETTINGS, EXTENSION_ID, SHIPPED_RDB, InstallSettings, build_extension, build_rdb

OFFICE_UNOPKG = Path("/usr/lib/libreoffice/program/unopkg")
SHARED_CACHE = "sheetnet-shared-packages"  # beside --profile, for root installs


class CalcSetupError(SheetnetError):
    """LibreOffice or its tools are missing, or unopkg refused."""


def default_extension_path() -> Path:
    return Path.home() / ".sheetnet" / "calc" / "sheetnet.oxt"


def find_unopkg() -> Path:
    found = shutil.which("unopkg")
    if found:
        return Path(found)
    if OFFICE_UNOPKG.exists():
        return OFFICE_UNOPKG
    raise CalcSetupError("unopkg was not found; install LibreOffice Calc (apt-get install libreoffice-calc-nogui python3-uno)")


def office_settings(profile: Path | None, as_root: bool | None = None) -> list[str]:
    """The ``-env:`` arguments unopkg and soffice both need for this profile."""
    as_root = os.geteuid() == 0 if as_root is None else as_root
    settings = []
    if profile is not None:
        settings.append(f"-env:UserInstallation={profile.resolve().as_uri()}")
        if as_root:
            settings.append(f"-env:UNO_SHARED_PACKAGES_CACHE={(profile.resolve().parent / (profile.name + '-' + SHARED_CACHE)).as_uri()}")
    return settings


def _unopkg(arguments: list[str], profile: Path | None) -> str:
    as_root = os.geteuid() == 0
    command = [str(find_unopkg()), *arguments[:1], *(["--shared"] if as_root else []), *arguments[1:], *office_settings(profile, as_root)]
    try:
        done = subprocess.run(command, capture_output=True, text=True, timeout=180)
    except subprocess.TimeoutExpired:
        raise CalcSetupError("unopkg did not finish within 3 minutes; close LibreOffice (it locks the profile) and try again") from None
    if done.returncode != 0:
        if "no such extension deployed" in done.stderr + done.stdout:
            raise CalcSetupError(f"unopkg {arguments[0]} failed: sheetnet's Calc extension is not installed in this profile; nothing to remove")
        text = (done.stderr or done.stdout).strip().splitlines()
        raise CalcSetupError(f"unopkg {arguments[0]} failed: {' '.join(text[-3:])}; close LibreOffice (it locks the profile) and try again")
    return done.stdout


def install(profile: Path | None = None, settings: InstallSettings = DEFAULT_SETTINGS, extension: Path | None = None) -> Path:
    """Build the extension and add it to the profile (the user's own when None); returns the .oxt."""
    target = build_extension(extension or default_extension_path(), settings)
    _unopkg(["add", "--force", "--suppress-license", str(target)], profile)
    return target


def remove(profile: Path | None = None) -> None:
    _unopkg(["remove", EXTENSION_ID], profile)


def add_calc_parser(commands: argparse._SubParsersAction) -> None:  # type: ignore[type-arg]
    calc = commands.add_parser("calc", help="sheetnet's cell functions in LibreOffice Calc (an extension)")
    actions = calc.add_subparsers(dest="calc_command", required=True)
    install_command = actions.add_parser("install", help="build the extension and add it to your LibreOffice profile")
    install_command.add_argument("--profile", type=Path, help="a LibreOffice profile folder other than your own")
    install_command.add_argument("--no-start", action="store_true", help="never start a server from Calc; cells then ask you to run sheetnet serve")
    install_command.add_argument("--interpreter", default=sys.executable, help="the Python that starts sheetnet serve when none runs (default: this one)")
    remove_command = actions.add_parser("remove", help="remove the extension from your LibreOffice profile")
    remove_command.add_argument("--profile", type=Path, help="a LibreOffice profile folder other than your own")
    build = actions.add_parser("build", help="write the extension file (.oxt) without installing it")
    build.add_argument("--out", type=Path, default=Path("sheetnet.oxt"), help="the .oxt to write (default sheetnet.oxt)")
    build.add_argument("--no-start", action="store_true", help="never start a server from Calc")
    build.add_argument("--interpreter", default=sys.executable, help="the Python that starts sheetnet serve when none runs")
    build.add_argument("--types", action="store_true", help="also recompile the shipped type library from the registry (needs the LibreOffice SDK)")


def run_calc(args: argparse.Namespace, out: TextIO) -> int:
    if args.calc_command == "remove":
        remove(args.profile)
        out.write("sheetnet's Calc extension removed\n")
        return 0
    settings = InstallSettings(interpreter=None if args.no_start else args.interpreter)
    if args.calc_command == "build":
        if args.types:
            try:
                build_rdb(SHIPPED_RDB)
            except (FileNotFoundError, RuntimeError) as error:
                raise CalcSetupError(str(error)) from None
            out.write(f"type library rebuilt: {SHIPPED_RDB}\n")
        out.write(f"extension written: {build_extension(args.out, settings)}\n")
        return 0
    target = install(args.profile, settings)
    out.write(f"sheetnet's Calc extension installed ({target})\n")
    extra = office_settings(args.profile)
    if os.geteuid() == 0:
        where = "beside the profile" if args.profile else "for every user of this machine"
        out.write(f"as root it was installed as a shared extension {where}\n")
    if extra:
        out.write(f"start LibreOffice with: soffice {' '.join(extra)}\n")
    out.write("in Calc: =SHEETNET.TRAIN(A1:D200; \"price\") entered as an array formula (Ctrl+Shift+Enter) over 9 columns; "
              "the model: Tools > Add-Ons > sheetnet: store a model from the selected table\n")
    if settings.interpreter:
        out.write(f"when no sheetnet server runs, Calc starts one with {settings.interpreter}\n")
    else:
        out.write("run sheetnet serve before using the functions\n")
    return 0
