"""The add-in's served files: the server's own address whatever the Host header says, the pane's content
policy, the manifest's shared-runtime wiring and the custom-functions metadata's contract options.

The options are checked against Microsoft's custom-functions metadata reference (custom-functions-json)
and the shared-runtime page (configure-your-add-in-to-use-a-shared-runtime); whether Excel itself accepts
them is not tested here (no Excel runs in CI).
"""

from __future__ import annotations

from xml.etree import ElementTree

import httpx
import pytest
from local_server import serving

from sheetnet import server
from sheetnet.addin import CHOICES, PANE_POLICY, addin_headers, functions_metadata, served_base
from sheetnet.functions import PREDICT_OUTPUTS
from sheetnet.registry import REGISTRY

TOKEN = "addin-files-token-0123456789abcdef"
OFFICE = "{http://schemas.microsoft.com/office/taskpaneappversionoverrides}"


@pytest.fixture(scope="module")
def base_url():
    with serving(server.create_app(TOKEN, origin="http://127.0.0.1")) as address:
        yield address


@pytest.mark.parametrize("name", ["functions.js", "manifest.xml", "taskpane.html"])
def test_served_files_name_the_listening_address_not_the_host_header(base_url, name):
    port = base_url.rsplit(":", 1)[1]
    plain = httpx.get(f"{base_url}/addin/{name}")
    # a Host the server answers but that is not how it names itself, and one it should refuse outright
    for host in (f"localhost:{port}", "sheetnet.attacker.example:80"):
        answer = httpx.get(f"{base_url}/addin/{name}", headers={"Host": host})
        if answer.status_code == 200:
            assert answer.text == plain.text and host not in answer.text
        else:
            assert answer.status_code == 421 and "attacker" in host  # the server's own Host check
    if name != "taskpane.html":  # the page names no address; its scripts do
        assert base_url in plain.text


def test_served_base_reads_the_socket_entry_only():
    scope = {"scheme": "https", "server": ("127.0.0.1", 8765), "headers": [(b"host", b"evil.example")]}
    assert served_base(scope, "http://127.0.0.1") == "https://127.0.0.1:8765"
    assert served_base({"scheme": "http", "headers": [(b"host", b"evil.example")]}, "http://127.0.0.1:9") == "http://127.0.0.1:9"
    assert served_base({"scheme": "http", "server": ("::1", 8765)}, "x") == "http://[::1]:8765"


def test_the_pane_page_carries_its_content_policy(base_url):
    page = httpx.get(f"{base_url}/addin/taskpane.html")
    assert page.headers["content-security-policy"] == PANE_POLICY
    assert "'unsafe-inline'" not in PANE_POLICY and "'unsafe-eval'" not in PANE_POLICY
    assert "onerror=" not in page.text and "<script>" not in page.text  # nothing inline for the policy to refuse
    script = httpx.get(f"{base_url}/addin/taskpane.js")
    assert script.headers["x-content-type-options"] == "nosniff" and "content-security-policy" not in script.headers
    assert "innerHTML" not in script.text and "insertAdjacentHTML" not in script.text
    assert addin_headers("icon-16.png") == {"X-Content-Type-Options": "nosniff"}


def test_the_ribbon_action_names_the_shared_runtime_pane(base_url):
    root = ElementTree.fromstring(httpx.get(f"{base_url}/addin/manifest.xml").text)
    runtime = [e.get("resid") for e in root.iter(f"{OFFICE}Runtime")]
    assert runtime == ["SN.Pane.Url"] and next(root.iter(f"{OFFICE}Runtime")).get("lifetime") == "long"
    actions = [e for e in root.iter(f"{OFFICE}Action")]
    assert actions and all(a.find(f"{OFFICE}TaskpaneId") is not None and a.find(f"{OFFICE}TaskpaneId").text for a in actions)
    assert [a.find(f"{OFFICE}SourceLocation").get("resid") for a in actions] == ["SN.Pane.Url"]
    page = next(root.iter(f"{OFFICE}Page")).find(f"{OFFICE}SourceLocation").get("resid")
    function_file = next(root.iter(f"{OFFICE}FunctionFile")).get("resid")
    assert page == function_file == "SN.Pane.Url"  # one runtime for the functions, the commands and the pane


def test_the_metadata_takes_error_inputs_cancels_training_and_offers_word_lists():
    metadata = functions_metadata()
    assert metadata["allowErrorForDataTypeAny"] is True
    described = {f["id"]: f for f in metadata["functions"]}
    for job in ("TRAIN", "SEARCH"):  # server jobs: cancelled with the cell, listed under its address
        assert described[job]["options"] == {"cancelable": True, "requiresAddress": True}
    assert all("options" not in f for i, f in described.items() if i not in ("TRAIN", "SEARCH"))
    enums = {e["id"]: [v["stringValue"] for v in e["values"]] for e in metadata["enums"]}
    for (function, argument), (enum_id, words) in CHOICES.items():
        parameter = next(p for p in described[function.split(".")[1]]["parameters"] if p["name"] == argument)
        assert parameter["customEnumId"] == enum_id and parameter["type"] == "string"  # the documented pattern
        assert enums[enum_id] == [w for w, _ in words]
    assert enums["PREDICTOUTPUTS"] == list(PREDICT_OUTPUTS)
    assert enums["SPLITMODES"] == ["random", "ordered", "stratified"]
    for entry in REGISTRY:  # every other parameter stays `any`, so error cells reach sheetnet
        for parameter in described[entry.name.split(".")[1]]["parameters"]:
            assert parameter["type"] == ("string" if "customEnumId" in parameter else "any")
