"""The Calc extension's files come from the one registry; the shipped type library equals a fresh
build; the server file is private and goes away with the server."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
import xml.etree.ElementTree as ElementTree
import zipfile
from pathlib import Path

import pytest

from sheetnet.calc import build
from sheetnet.calc.build import InstallSettings
from sheetnet.calc.commands import office_settings
from sheetnet.registry import REGISTRY
from sheetnet.server_file import read_server_file, remove_server_file, write_server_file


def test_interface_has_one_method_per_registry_function() -> None:
    idl = build.interface_idl()
    for entry in REGISTRY:
        parameters = ", ".join(f"[in] any {build.idl_name(a)}" for a in entry.arguments)
        assert f"sequence< sequence< any > > {entry.name.split('.')[1].lower()}({parameters});" in idl
    assert "holdoutShare" in idl and "holdout_share" not in idl  # UNO identifiers have no underscores


def test_shipped_type_library_equals_a_fresh_build(tmp_path: Path) -> None:
    if build.sdk_tool() is None:
        pytest.skip("unoidl-write (LibreOffice SDK: apt-get install libreoffice-dev) is not installed, so the shipped type library was not rebuilt")
    fresh = build.build_rdb(tmp_path / "fresh.rdb")
    assert fresh.read_bytes() == build.SHIPPED_RDB.read_bytes(), "the registry changed: run sheetnet calc build --types and commit sheetnet/calc/sheetnet.rdb"


def test_extension_holds_every_part_with_its_media_type(tmp_path: Path) -> None:
    oxt = build.build_extension(tmp_path / "sheetnet.oxt", InstallSettings(interpreter="/opt/python/bin/python3"))
    with zipfile.ZipFile(oxt) as archive:
        names = set(archive.namelist())
        manifest = ElementTree.fromstring(archive.read("META-INF/manifest.xml"))
        table = json.loads(archive.read("sheetnet_calc.json"))
        components = ElementTree.fromstring(archive.read("sheetnet.components"))
        addons = archive.read("Addons.xcu").decode()
    entries = {e.get("{http://openoffice.org/2001/manifest}full-path"): e.get("{http://openoffice.org/2001/manifest}media-type") for e in manifest}
    assert entries == build.MEDIA_TYPES
    assert names == {"META-INF/manifest.xml", "description.xml", "sheetnet_calc.py", "sheetnet_calc.json", *build.MEDIA_TYPES}
    assert "sheetnet_calc.py" not in entries  # passive registration through the .components file
    assert table["interpreter"] == "/opt/python/bin/python3" and table["service"] == "SHEETNET"
    assert [f["name"] for f in table["functions"]] == [e.name for e in REGISTRY]
    implementations = [i.get("name") for i in components.iter("{http://openoffice.org/2010/uno-components}implementation")]
    assert implementations == [build.FUNCTIONS_IMPLEMENTATION, build.COMMAND_IMPLEMENTATION]
    assert build.STORE_COMMAND in addons and "com.sun.star.sheet.SpreadsheetDocument" in addons


def test_component_imports_nothing_but_the_standard_library_and_uno() -> None:
    source = build.COMPONENT_SOURCE.read_text()
    imports = {line.split()[1].split(".")[0] for line in source.splitlines() if line.startswith(("import ", "from "))}
    standard = {"base64", "json", "math", "os", "socket", "ssl", "struct", "subprocess", "time", "urllib"}
    assert imports <= standard | {"unohelper", "com", build.IDL_MODULE}


def test_root_installs_need_the_shared_cache_setting(tmp_path: Path) -> None:
    profile = tmp_path / "profile"
    assert office_settings(profile, as_root=False) == [f"-env:UserInstallation={profile.as_uri()}"]
    as_root = office_settings(profile, as_root=True)
    assert as_root[1] == f"-env:UNO_SHARED_PACKAGES_CACHE={(tmp_path / 'profile-sheetnet-shared-packages').as_uri()}"
    assert office_settings(None, as_root=True) == []


def test_server_file_is_private_and_removed_by_its_owner(tmp_path: Path) -> None:
    path = tmp_path / ".sheetnet" / "server.json"
    write_server_file(8765, "t" * 20, path=path)
    assert path.stat().st_mode & 0o777 == 0o600
    assert read_server_file(path) == {"scheme": "http", "port": 8765, "token": "t" * 20, "pid": os.getpid(), "version": json.loads(path.read_text())["version"]}
    assert not remove_server_file(path, pid=os.getpid() + 1)  # another server's file stays
    assert remove_server_file(path) and not path.exists()


def test_a_dead_servers_file_is_ignored(tmp_path: Path) -> None:
    finished = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True, check=True)
    path = write_server_file(8765, "t" * 20, path=tmp_path / "server.json", pid=int(finished.stdout))
    assert read_server_file(path) is None


def test_serve_writes_the_file_and_removes_it_on_exit(tmp_path: Path) -> None:
    import socket

    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    command = [sys.executable, "-c", "import sys; from sheetnet.cli import main; sys.exit(main(sys.argv[1:]))", "serve", "--port", str(port)]
    environment = dict(os.environ, HOME=str(tmp_path), SHEETNET_TOKEN="s" * 24)
    server = subprocess.Popen(command, env=environment, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    path = tmp_path / ".sheetnet" / "server.json"
    try:
        deadline = time.monotonic() + 60
        while read_server_file(path) is None and time.monotonic() < deadline and server.poll() is None:
            time.sleep(0.1)
        record = read_server_file(path)
        assert record is not None and record["port"] == port and record["token"] == "s" * 24 and record["pid"] == server.pid
        assert path.stat().st_mode & 0o777 == 0o600
    finally:
        server.send_signal(signal.SIGTERM)
        _, errors = server.communicate(timeout=60)
    assert not path.exists(), errors


def test_install_and_remove_in_a_temporary_profile(tmp_path: Path) -> None:
    import shutil

    if shutil.which("unopkg") is None:
        pytest.skip("unopkg (LibreOffice: apt-get install libreoffice-calc-nogui) is not installed")
    from sheetnet.calc import commands

    profile = tmp_path / "profile"

    def listed() -> str:
        shared = ["--shared"] if os.geteuid() == 0 else []
        done = subprocess.run([str(commands.find_unopkg()), "list", *shared, *office_settings(profile)], capture_output=True, text=True, timeout=180,
                              env=dict(os.environ, HOME=str(tmp_path)))
        return done.stdout

    oxt = commands.install(profile, InstallSettings(), tmp_path / "sheetnet.oxt")
    assert oxt.exists() and f"Identifier: {build.EXTENSION_ID}" in listed()
    commands.remove(profile)
    assert build.EXTENSION_ID not in listed()
    with pytest.raises(commands.CalcSetupError, match="not installed in this profile; nothing to remove"):
        commands.remove(profile)  # nothing left to remove: a message, not a traceback
