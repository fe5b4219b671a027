// sheetnet custom functions: each forwards its arguments to the local sheetnet server.
// The token is the one the task pane stored (the server prints it at start).
const SHEETNET_BASE = "%SHEETNET_BASE%";

function sheetnetToken() {
  try {
    return window.localStorage.getItem("sheetnet-token") || "";
  } catch (error) {
    return "";
  }
}

async function callSheetnet(name, args) {
  const token = sheetnetToken();
  if (!token) {
    return [["#SHEETNET! no access token yet: open the sheetnet task pane and paste the token sheetnet serve printed"]];
  }
  try {
    const response = await fetch(`${SHEETNET_BASE}/v1/functions/${encodeURIComponent(name)}`, {
      method: "POST",
      headers: { "Authorization": `Bearer ${token}`, "Content-Type": "application/json" },
      body: JSON.stringify({ args: args.map((value) => (value === undefined ? null : value)) }),
    });
    const body = await response.json();
    if (!response.ok) {
      return [[`#SHEETNET! ${body.detail}`]];
    }
    return body.result.map((row) => row.map((value) => (value === null ? "" : value)));
  } catch (error) {
    return [[`#SHEETNET! the sheetnet server at ${SHEETNET_BASE} did not answer; start it with sheetnet serve`]];
  }
}
