"""The `sheetnet` command line.

Errors of sheetnet's own are caught once here and printed as ``Type: message``
with exit code 1; anything else is a bug and keeps its traceback.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import Any, Sequence, TextIO

from . import __version__
from .errors import InputError, SettingError, SheetnetError

CAUTION = (
    "A model is a decision aid, not a decision. Where its output affects people "
    "(credit, hiring, medical or safety decisions), check it for bias across groups, "
    "keep a person accountable for each decision, and follow local law and licensed practice."
)


class ProgressLine:
    """Training progress on one terminal line (quiet when the stream is not a terminal)."""

    def __init__(self, label: str, stream: TextIO = sys.stderr) -> None:
        self.label = label
        self.stream = stream
        self.live = stream.isatty()
        self._last = 0.0

    def __call__(self, epoch: int, most: int, training_loss: float, validation_loss: float | None) -> None:
        now = time.monotonic()
        if not self.live or now - self._last < 0.1:
            return
        self._last = now
        filled = int(20 * epoch / most)
        val = "" if validation_loss is None else f"  validation loss {validation_loss:.4g}"
        self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (20 - filled)}] epoch {epoch}  loss {training_loss:.4g}{val}   ")
        self.stream.flush()

    def done(self) -> None:
        if self.live:
            self.stream.write("\r" + " " * 100 + "\r")
            self.stream.flush()


def _in_words(name: str, value: Any) -> str:
    """A metric's label and value in words beside its identifier (MAPE 36.6 %), or nothing for other rows."""
    from .labels import METRIC_LABELS, metric_in_words

    key = name.removeprefix("holdout ")
    return f"   {metric_in_words(key, value)}" if key in METRIC_LABELS and isinstance(value, float) else ""


def _print_metrics(metrics: dict[str, Any], out: TextIO) -> None:
    for name, value in metrics.items():
        if isinstance(value, float):
            out.write(f"    {name:<32} {value:.4f}{_in_words(name, value)}\n")
        elif value is None or value == "":
            out.write(f"    {name:<32} (not defined for these rows)\n")


def run_demo(seed: int, out: TextIO, workbook: Path, pictures: Path | None = None) -> int:
    """Write the demo workbook (three invented scenarios), print holdout metrics, draw pictures on request."""
    from .demo_workbook import build_demo_workbook

    bars: list[ProgressLine] = []

    def progress_for(label: str) -> ProgressLine:
        if bars:
            bars[-1].done()
        bars.append(ProgressLine(f"training {label}"))
        return bars[-1]

    out.write(f"sheetnet {__version__}: demo on invented data (seed {seed})\n")
    target, results = build_demo_workbook(workbook, seed, progress_for)
    if bars:
        bars[-1].done()
    drawn: list[Path] = []
    for number, result in enumerate(results, start=1):
        model, scenario = result.model, result.scenario
        holdout = int(result.metrics.get("rows", 0))
        out.write(f"\n{number}. {scenario.sheet}: {scenario.title} ({len(scenario.table)} rows, {holdout} held out)\n")
        out.write(f"   network {'-'.join(map(str, model.sizes))}, {model.algorithm}, stopped by '{model.stopped_by}' after {model.epochs} epochs\n")
        _print_metrics({k: v for k, v in result.metrics.items() if k != "rows"}, out)
        if result.confusion is not None:
            _print_confusion(result.confusion, list(model.classes), out)
        if pictures is not None:
            drawn.extend(_draw(result, pictures / f"{number}-{scenario.sheet.lower()}"))
    out.write(f"\nworkbook: {target} (models on very hidden sheets, predictions beside the data, charts)\n")
    if drawn:
        out.write("pictures:\n" + "".join(f"  {path}\n" for path in drawn))
    out.write(f"\n{CAUTION}\n")
    return 0


def _print_confusion(matrix: Any, classes: list[Any], out: TextIO) -> None:
    out.write("    confusion (rows actual, columns predicted): " + " ".join(map(str, classes)) + "\n")
    for label, row in zip(classes, matrix):
        out.write(f"      {str(label):<10} " + " ".join(f"{n:>5d}" for n in row) + "\n")


def _draw(result: Any, stem: Path) -> list[Path]:
    from .demo_workbook import draw_pictures

    return draw_pictures(result, stem)


def _settings_text(pairs: Sequence[str]) -> str:
    for pair in pairs:
        if "=" not in pair:
            raise SettingError(f"--set '{pair}' has no '='; write it like --set epochs=500")
    return "; ".join(pairs)


def _print_rows(rows: list[list[Any]], out: TextIO) -> None:
    for name, value, *_ in rows:
        shown = f"{value:.4f}" if isinstance(value, float) else str(value)
        out.write(f"    {str(name):<24} {shown}{_in_words(str(name), value)}\n")


def _saved(book: Any, out: TextIO) -> None:
    from .workbook import save_book

    target, note = save_book(book)
    if note:
        out.write(f"note: {note}\n")
    out.write(f"saved {target}\n")


def run_train(args: argparse.Namespace, out: TextIO) -> int:
    import contextlib

    from . import functions, parallel, service
    from .progress import TerminalProgress, reporting_to
    from .workbook import check_can_save, open_book, read_range
    from .workbook_models import check_storable, results_sheet, store_model

    book = open_book(args.book)
    check_storable(book, args.name, args.replace)
    check_can_save(book)  # a read-only or open workbook is refused before training, not after
    replaced_signature = _signer_of(book, args.name)
    table = read_range(book, args.table)
    request = service.TrainRequest(table, args.target, args.hidden, _settings_text(args.set), args.holdout, args.mode, args.seed, args.table)
    bar = ProgressLine(f"training {args.name}")
    repeats = TerminalProgress()  # "repeats: k of n done" when several networks train
    with parallel.cluster(args.cluster) if args.cluster else contextlib.nullcontext(), reporting_to(repeats):
        trained = service.train_model(request, bar)
    repeats.done()
    bar.done()
    store_model(book, args.name, trained.block, args.replace)
    answer = functions.raising(functions.predict)(trained.block, table, "value")
    about = functions.raising(functions.about)(trained.block)
    results_sheet(book, service.results_sheet_name(args.name), service.training_results(args.name, args.table, table, trained, answer, about))
    _saved(book, out)
    out.write(f"model {args.name} stored under the defined name {args.name}\n")
    if replaced_signature:
        out.write(f"note: {_UNSIGNED_AGAIN.format(name=args.name, key=replaced_signature, book=args.book)}\n")
    summary = dict((r[0], r[1]) for r in about[1:])
    out.write(f"  task {summary['task']}; network {summary['layers']}, {summary['algorithm']}, ")
    out.write(f"stopped by '{summary['stopped by']}' after {summary['epochs']} epochs\n")
    if "task chosen" in summary:
        out.write(f"  {summary['task chosen']}\n")
    holdout = [r for r in about[1:] if str(r[0]).startswith("holdout ")]
    if holdout:
        out.write("  holdout metrics:\n")
        _print_rows(holdout, out)
    out.write(f"{CAUTION}\n")
    return 0


_UNSIGNED_AGAIN = "the model it replaced was signed by the key {key}; the new block is unsigned until you sign it (sheetnet sign {book} --model {name})"


def _signer_of(book: Any, name: str) -> str:
    """The key id that signed the model stored as ``name`` now, or '' (no such model, unsigned, or damaged)."""
    from .signing import check_signature
    from .workbook import defined_name, model_names, read_model

    found = defined_name(book, name)
    if found is None or found not in model_names(book):
        return ""
    try:
        signature = check_signature(read_model(book, found), ())
    except SheetnetError:
        return ""
    return signature.key_id if signature.state != "wrong" else ""


def run_predict(args: argparse.Namespace, out: TextIO) -> int:
    from . import functions, service
    from .workbook import check_can_save, defined_name, open_book, read_model, read_range
    from .workbook_models import check_empty, results_sheet

    book = open_book(args.book)
    check_can_save(book)
    block = read_model(book, args.model)
    table = read_range(book, args.table)
    answer = functions.raising(functions.predict)(block, table, args.output)
    if args.to:
        sheet, top, left = check_empty(book, args.to, len(answer), len(answer[0]))
        book.log.add(service.Placements(cells=(service.cell_block(sheet, top, left, answer),)))
    else:
        title = service.results_sheet_name(defined_name(book, args.model) or args.model, "predict")
        sheet, top, left = results_sheet(book, title, [(3, 1, service.predictions_shown(answer))]), 3, 1
    _saved(book, out)
    out.write(f"{len(answer) - 1} rows predicted with model {args.model}, written to {sheet}!{service.column_letters(left)}{top}\n")
    return 0


def run_formulas(args: argparse.Namespace, out: TextIO) -> int:
    from .formulas import FormulaError
    from .workbook import check_can_save, open_book
    from .workbook_models import native_formula_problems, table_rows_for_check, write_native_formulas

    book = open_book(args.book)
    check_can_save(book)
    where, rows = write_native_formulas(book, args.model, args.table, args.to, args.output)
    frame, sheet_rows = table_rows_for_check(book, args.model, args.table)
    problems = native_formula_problems(book, args.model, frame, sheet_rows)  # evaluated before anything is saved
    if problems:
        raise FormulaError(f"the native formulas would not give the model's answers ({'; '.join(problems[:3])}); nothing was written. Please report this")
    _saved(book, out)
    out.write(f"{rows} rows of native formulas for model {args.model} written to {where}; ")
    out.write(f"they read the model's constants through names starting snf_{args.model}_\n")
    return 0


XL_STEPS = """Remaining steps, in desktop Excel on Windows (macOS: the macros only; Excel for Mac has no xlwings UDFs):
  1. pip install sheetnet in the Python that Excel should use (the interpreter written to xlwings.conf).
  2. xlwings addin install   (copies xlwings' open-source add-in into Excel's start-up folder)
  3. Open the workbook; in the VBA editor set a reference to xlwings (Tools > References).
  4. On the xlwings ribbon tab press Import Functions: SHEETNET_SPLIT, SHEETNET_TRAIN, ... appear as functions.
  5. For the macros, add a button whose VBA calls for example
       RunPython "import sheetnet.xl_macros as m; m.train_selection('grade', 'grades', '6', 'ignore=lot')"
     (also m.refresh_models(), m.remove_model('grades'), m.export_formulas('grades', 'Data!J1')).
"""


def run_xl_setup(args: argparse.Namespace, out: TextIO) -> int:
    from .placements import Placements, SheetPlan, cell_block, same_title
    from .workbook import open_book

    book = open_book(args.book)
    wanted = {"UDF MODULES": "sheetnet.xl_udfs"}
    if args.interpreter_win:
        wanted["INTERPRETER_WIN"] = args.interpreter_win
    if args.interpreter_mac:
        wanted["INTERPRETER_MAC"] = args.interpreter_mac
    title = next((t for t in book.formulas.sheetnames if same_title(t, "xlwings.conf")), None)
    if title is None:
        rows = [[key, value] for key, value in wanted.items()]
        book.log.add(Placements(sheets=(SheetPlan("xlwings.conf"),), cells=(cell_block("xlwings.conf", 1, 1, rows),)))
    else:  # the sheet is the user's: add the keys it lacks below its rows, never change a value it holds
        sheet = book.formulas[title]
        have = {str(row[0]).strip().upper(): row[1] for row in sheet.iter_rows(max_col=2, values_only=True) if row[0] is not None}
        for key, value in wanted.items():
            if key in have and str(have[key]).strip() != value:
                raise InputError(f"the sheet {title} already sets {key} to {have[key]}; change it there to {value} (or clear that row) and run this again")
        missing = [[key, value] for key, value in wanted.items() if key not in have]
        if missing:
            book.log.add(Placements(cells=(cell_block(title, sheet.max_row + 1, 1, missing),)))
    _saved(book, out)
    out.write("the workbook's xlwings.conf sheet now names sheetnet.xl_udfs as its UDF module\n" + XL_STEPS)
    return 0


def run_serve(args: argparse.Namespace, out: TextIO) -> int:
    import os
    import socket

    from .server import create_app, new_token, server_options

    # Listen before announcing: a caller that finds the server file must find the port open (the Calc extension
    # starts a server and calls it as soon as the file appears).
    try:
        listening = socket.create_server(("127.0.0.1", args.port), backlog=128)
    except OSError:
        raise InputError(f"port {args.port} on 127.0.0.1 is in use (another sheetnet serve?); stop that program or choose another port with --port") from None
    token = os.environ.get("SHEETNET_TOKEN") or new_token()
    scheme = "https" if args.https else "http"
    base = f"{scheme}://127.0.0.1:{args.port}"
    tls: dict[str, str] = {}
    if args.https:
        from .tls import local_certificate

        certificate, key = local_certificate(args.cert_dir)
        tls = {"ssl_certfile": str(certificate), "ssl_keyfile": str(key)}
        out.write(f"TLS certificate for localhost and 127.0.0.1 only: {certificate}\n{TRUST_STEPS}")
    out.write(f"sheetnet server on {base} (this machine only)\n")
    out.write(f"access token: {token}\n")
    out.write(f"task pane / dashboard: {base}/addin/taskpane.html#token={token}\n")
    out.write(f"add-in manifest: {base}/addin/manifest.xml\n")
    out.flush()
    app = create_app(token, origin=base)
    from .server_file import exit_cleanly_on_terminate, remove_server_file, write_server_file

    exit_cleanly_on_terminate()
    own_certificate = Path(tls["ssl_certfile"]) if tls else None
    server_file = write_server_file(listening.getsockname()[1], token, scheme, certificate=own_certificate)
    try:
        serve_forever(app, listening, host="127.0.0.1", port=args.port, **server_options(), **tls)  # slow sockets closed
    finally:
        remove_server_file(server_file)
        listening.close()
    return 0


def serve_forever(app: Any, listening: Any, **options: Any) -> None:
    """Run the app on a socket that already listens (``options``: uvicorn's host, port and TLS files)."""
    import uvicorn

    uvicorn.Server(uvicorn.Config(app, log_level="warning", **options)).run(sockets=[listening])


TRUST_STEPS = """What you would trust: this one certificate, made on this computer for its own addresses
(localhost and 127.0.0.1) and nothing else. It is not a certificate authority: it cannot vouch for any
other site, and its private key (sheetnet-local.key beside it, readable by you only) never leaves this computer.
To let Excel load the add-in over https, trust it once (and remove it the same way when you stop using sheetnet):
  Windows: double-click the .crt file > Install Certificate > Current User > Place all certificates in the
    following store > Trusted Root Certification Authorities (where Windows keeps certificates that sign
    themselves; this one still vouches only for localhost and 127.0.0.1).
  macOS: open it in Keychain Access, then set 'When using this certificate' to Always Trust.
  Excel on the web in a browser: open the task pane address printed below once and accept this certificate for it.
"""


def run_models(args: argparse.Namespace, out: TextIO) -> int:
    from . import functions
    from .workbook import model_names, open_book, read_model

    book = open_book(args.book)
    names = model_names(book)
    if not names:
        out.write(f"{args.book}: no sheetnet models\n")
    for name in names:
        about = functions.about(read_model(book, name))
        out.write(f"{name}\n")
        _print_rows(about[1:] if len(about[0]) == 2 else [["problem", about[0][0]]], out)
    return 0


CHECKSUM_NOTE = (
    "note: a checksum catches accidental damage only; anyone who edits a block can compute it again. "
    "Only a signature by a key you trust shows who wrote a model (sheetnet check --trusted-only refuses the others)."
)


def run_check(args: argparse.Namespace, out: TextIO) -> int:
    """Verify every model: intact (checksum, structure, native-formula constants and formulas) and who signed it."""
    from .keyring import trusted_keys
    from .service import MODEL_SHEET_PREFIX, constant_owner
    from .workbook import model_names, open_book

    trusted = trusted_keys(args.keys)  # a damaged trust folder is refused before any model is read
    book = open_book(args.book)
    names = set(model_names(book))
    sheets: dict[str, list[str]] = {}
    for name, defined in book.formulas.defined_names.items():
        try:
            destinations = list(defined.destinations)
        except (AttributeError, ValueError, TypeError):  # a name with no range, such as an add-in function LibreOffice declares
            continue
        if len(destinations) == 1 and destinations[0][0].lower().startswith(MODEL_SHEET_PREFIX) and constant_owner(name) is None:
            names.add(name)
            sheets.setdefault(destinations[0][0].casefold(), []).append(name)
    failed = signed = 0
    for name in sorted(names):
        sharing = [other for group in sheets.values() if name in group for other in group if other != name]
        try:
            signature = _checked_model(book, name, sharing, trusted)
        except SheetnetError as error:
            failed += 1
            out.write(f"FAILED  {name}: {error}\n")
            continue
        signed += signature.state == "trusted"
        if args.trusted_only and signature.state != "trusted":
            failed += 1
            out.write(f"REFUSED {name}: {signature.in_words()}\n")
        else:
            out.write(f"ok      {name}: intact; {signature.in_words()}\n")
    out.write(f"{len(names) - failed} of {len(names)} models verified (intact{', signed by a trusted key' if args.trusted_only else ''}); ")
    out.write(f"{signed} signed by a trusted key\n")
    if names and signed < len(names) and not args.trusted_only:
        out.write(CHECKSUM_NOTE + "\n")
    return 1 if failed else 0


def _checked_model(book: Any, name: str, sharing: list[str], trusted: Any) -> Any:
    """One model's signature finding; a `BlockError` for anything else wrong. The signature is checked before the
    native-formula constants: a forger who edits the weights can edit the constants to match."""
    from .block import BlockError, decode_block
    from .signing import check_signature
    from .workbook import read_model
    from .workbook_models import changed_constants, native_formula_problems

    block = read_model(book, name)
    decode_block(block)
    if sharing:
        raise BlockError(f"this model shares its hidden sheet with {', '.join(sharing)}, so one overwrote the other; train it again under its name")
    signature = check_signature(block, trusted)
    if signature.state == "wrong":
        raise BlockError(signature.in_words())
    changed = changed_constants(book, name)
    if changed:
        raise BlockError(f"the native-formula constants {', '.join(changed)} differ from the model block; run sheetnet formulas again or retrain")
    problems = native_formula_problems(book, name)
    if problems:
        raise BlockError(f"its native formulas do not give the model's answers ({'; '.join(problems[:3])}); run sheetnet formulas again or retrain")
    return signature


def run_sign(args: argparse.Namespace, out: TextIO) -> int:
    """Sign the workbook's models (or one) with a signing key; only the models' own sheets change."""
    from .keyring import signing_key
    from .signing import sign_block
    from .workbook import check_can_save, defined_name, model_names, open_book, read_model
    from .workbook_models import store_model

    key = signing_key(args.key, args.keys)
    book = open_book(args.book)
    check_can_save(book)
    names = model_names(book)
    if args.model:
        found = defined_name(book, args.model)
        if found is None or found not in names:
            raise InputError(f"the workbook has no model named '{args.model}'" + (f"; its models are: {', '.join(names)}" if names else ""))
        names = [found]
    if not names:
        raise InputError(f"{args.book} holds no sheetnet models to sign; train one first (sheetnet train)")
    problems, changed = [], []
    for name in names:
        block = read_model(book, name)
        try:
            signed = sign_block(block, key)
        except SheetnetError as error:
            problems.append(f"{name}: {error}")
            continue
        if signed != [["" if v is None else v for v in row] for row in block]:
            store_model(book, name, signed, replace=True)
            changed.append(name)
    if problems:
        raise InputError("nothing was signed: " + "; ".join(problems) + " (sign the other models one by one with --model)")
    if changed:
        _saved(book, out)
    for name in names:
        out.write(f"{'signed ' if name in changed else 'already'} {name}: by the key '{key.name}' ({key.key_id})\n")
    return 0


def run_keys(args: argparse.Namespace, out: TextIO) -> int:
    """Make a signing key, list the keys, trust a public key or forget one."""
    from . import keyring
    from .signing import SigningKey, make_key

    if args.keys_command == "make":
        key = make_key(args.name)
        private, public = keyring.save_signing_key(key, args.keys, trust=not args.no_trust)
        out.write(f"signing key '{key.name}' ({key.key_id}) made\n  private: {private} (readable by you only: keep it so, and keep a copy safe)\n")
        out.write(f"  public:  {public} (give this file to whoever should trust models you sign)\n")
        out.write("  trusted on this computer as well\n" if not args.no_trust else "")
    elif args.keys_command == "trust":
        found = keyring.read_key_file(args.file)
        if isinstance(found, SigningKey):
            raise InputError(f"{args.file} is a private signing key; trust its public half (the .pub file) instead, and keep the .key file private")
        trusted, path = keyring.trust_key(found, args.keys, args.name)
        done = f"now trusted ({path})" if path else "was trusted already"
        out.write(f"the key '{trusted.name}' ({trusted.key_id}) {done}\n")
    elif args.keys_command == "forget":
        out.write(f"no longer trusted: {args.name} (removed {keyring.forget_key(args.name, args.keys)})\n")
    else:
        folder = keyring.key_folder(args.keys)
        own = sorted(folder.glob("*.key")) if folder.is_dir() else []
        out.write(f"key folder: {folder}\nsigning keys:\n" + ("" if own else "  (none: sheetnet keys make NAME)\n"))
        for path in own:
            mine = keyring.read_key_file(path)
            out.write(f"  {mine.name:<24} {mine.key_id}  {path}\n")
        known = keyring.trusted_keys(args.keys)
        out.write("trusted keys:\n" + ("" if known else "  (none: sheetnet keys trust FILE.pub)\n"))
        for entry in known:
            out.write(f"  {entry.name:<24} {entry.key_id}\n")
    return 0


def run_refresh(args: argparse.Namespace, out: TextIO) -> int:
    """Retrain the stored models whose source range changed since training; report every model."""
    from . import functions, service
    from .block import decode_block
    from .workbook import check_can_save, defined_name, model_names, open_book, read_model, read_range
    from .workbook_models import results_sheet, store_model

    book = open_book(args.book)
    if not args.dry_run:
        check_can_save(book)  # refused before any retraining
    names = model_names(book)
    if args.model:
        found = defined_name(book, args.model)
        if found is None or found not in names:
            raise InputError(f"the workbook has no model named '{args.model}'" + (f"; its models are: {', '.join(names)}" if names else ""))
        names = [found]
    outcomes = [service.refresh_model(name, read_model(book, name), lambda address: read_range(book, address), args.dry_run) for name in names]
    signers = {o.name: _signer_of(book, o.name) for o in outcomes if o.trained is not None}
    for outcome in outcomes:
        if outcome.trained is not None and outcome.table is not None:
            block, table = outcome.trained.block, outcome.table
            store_model(book, outcome.name, block, replace=True)
            address = decode_block(block)[1].source[0]  # type: ignore[index]
            answer = functions.raising(functions.predict)(block, table, "value")
            about = functions.raising(functions.about)(block)
            results = service.training_results(outcome.name, address, table, outcome.trained, answer, about)
            results_sheet(book, service.results_sheet_name(outcome.name), results)
    labels = {"retrained": "retrained", "unchanged": "unchanged", "stale": "stale    ", "no-source": "left     ", "failed": "FAILED   "}
    for outcome in outcomes:
        detail = f": {outcome.message}" if outcome.message else ""
        out.write(f"{labels[outcome.state]} {outcome.name}{detail}\n")
        if signers.get(outcome.name):
            out.write(f"  note: {_UNSIGNED_AGAIN.format(name=outcome.name, key=signers[outcome.name], book=args.book)}\n")
    if any(o.trained is not None for o in outcomes):
        _saved(book, out)
    elif not outcomes:
        out.write(f"{args.book}: no sheetnet models\n")
    return 1 if any(o.state == "failed" for o in outcomes) else 0


def run_functions(out: TextIO) -> int:
    from .registry import REGISTRY

    for entry in REGISTRY:
        arguments = ", ".join(f"[{a.name}]" if a.optional else a.name for a in entry.arguments)
        out.write(f"{entry.name}({arguments})\n    {entry.help} Returns {entry.returns}.\n")
        for argument in entry.arguments:
            out.write(f"      {argument.name}: {argument.help}\n")
    return 0


def build_parser() -> argparse.ArgumentParser:
    from .service import DEFAULT_HIDDEN, DEFAULT_HOLDOUT, HOLDOUT_MODES

    parser = argparse.ArgumentParser(prog="sheetnet", description="Small neural networks for spreadsheet data.")
    parser.add_argument("--version", action="version", version=f"sheetnet {__version__}")
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="train and check models on the built-in invented scenarios")
    demo.add_argument("--seed", type=int, default=0, help="seed for data, splits and training (default 0)")
    demo.add_argument("--out", type=Path, default=Path("sheetnet-demo.xlsx"), metavar="FILE", help="the demo workbook to write (default: sheetnet-demo.xlsx)")
    demo.add_argument("--pictures", type=Path, metavar="FOLDER", help="also write PNG pictures of the curves and matrices into this folder")
    commands.add_parser("settings", help="list every training setting with its default")
    commands.add_parser("functions", help="list the cell functions and their arguments")

    train = commands.add_parser("train", help="train a model on a range of a workbook file and store it in the workbook")
    train.add_argument("book", type=Path, help="the .xlsx or .xlsm file")
    train.add_argument("--table", required=True, help="the table with its header row, like 'Data!A1:F500'")
    train.add_argument("--target", required=True, help="the column to predict")
    train.add_argument("--name", required=True, help="the model's name (a workbook-level defined name)")
    train.add_argument("--hidden", default=DEFAULT_HIDDEN, help="hidden layer widths, like 8 or 8,4, or 0 for none "
                       "(default: one layer of 16; on a small table 16, 4 or none, as cross-validation prefers)")
    train.add_argument("--holdout", type=float, default=DEFAULT_HOLDOUT, help=f"share of rows held out for checking (default {DEFAULT_HOLDOUT}; 0 for none)")
    train.add_argument(
        "--mode", default="auto", choices=list(HOLDOUT_MODES),
        help="how holdout rows are chosen (auto: stratified by the target when it is learned as classes, else random)",
    )
    train.add_argument("--seed", type=int, default=None, help="seed of the split and the training (default: the seed setting, else 0)")
    train.add_argument("--set", action="append", default=[], metavar="NAME=VALUE", help="a training setting; repeat for more (see: sheetnet settings)")
    train.add_argument("--replace", action="store_true", help="replace a stored model of the same name")
    train.add_argument("--cluster", metavar="ADDRESS", help="train repeats on the Dask scheduler at ADDRESS, like tcp://10.1.2.3:8786 (default: this machine)")

    predict = commands.add_parser("predict", help="predict a range of a workbook file with a stored model")
    predict.add_argument("book", type=Path)
    predict.add_argument("--model", required=True, help="the stored model's name")
    predict.add_argument("--table", required=True, help="the rows to predict, with a header row, like 'New!A1:E90'")
    predict.add_argument("--to", help="an empty range to write into, like 'New!H1'; default: a sheet of sheetnet's")
    predict.add_argument("--output", default="value", help="value, probabilities, interval, set, spread, flag (may be combined)")

    native = commands.add_parser("formulas", help="write native spreadsheet formulas that predict with no Python")
    native.add_argument("book", type=Path)
    native.add_argument("--model", required=True, help="the stored model's name")
    native.add_argument("--table", required=True, help="the rows to predict, with a header row, like 'Data!A1:E500'")
    native.add_argument("--to", help="an empty range to write into, like 'Data!H1'; default: a sheet of sheetnet's")
    native.add_argument("--output", default="value", choices=["value", "class", "probabilities", "interval"],
                        help="what each formula gives (default value; interval: the conformal low and high ends, for numbers)")

    xl = commands.add_parser("xl", help="prepare a workbook for desktop Excel through xlwings")
    xl_commands = xl.add_subparsers(dest="xl_command", required=True)
    setup = xl_commands.add_parser("setup", help="write the xlwings.conf sheet that points Excel at sheetnet's functions")
    setup.add_argument("book", type=Path)
    setup.add_argument("--interpreter-win", help="the python.exe Excel should run on Windows")
    setup.add_argument("--interpreter-mac", help="the python Excel should run on macOS")

    serve = commands.add_parser("serve", help="run the local server for sheetnet's Office add-in (127.0.0.1 only)")
    serve.add_argument("--port", type=int, default=8765, help="the port (default 8765)")
    serve.add_argument("--https", action="store_true", help="serve over https with a locally generated certificate")
    serve.add_argument("--cert-dir", type=Path, default=Path.home() / ".sheetnet" / "tls", help="where the certificate is kept")

    from .calc.commands import add_calc_parser

    add_calc_parser(commands)
    from .search_command import add_search_parser

    add_search_parser(commands)
    refresh = commands.add_parser("refresh", help="retrain the stored models whose data changed since training")
    refresh.add_argument("book", type=Path)
    refresh.add_argument("--model", help="only this model (default: every stored model)")
    refresh.add_argument("--dry-run", action="store_true", help="only report which models are stale; change nothing")
    models = commands.add_parser("models", help="list the models stored in a workbook file")
    models.add_argument("book", type=Path)
    keys_folder = argparse.ArgumentParser(add_help=False)
    keys_folder.add_argument("--keys", type=Path, metavar="FOLDER", help="the key folder (default: $SHEETNET_KEYS, else ~/.sheetnet/keys)")
    check = commands.add_parser(
        "check", parents=[keys_folder],
        help="verify every model block in a workbook file and say who signed it (exit code 1 if one fails)",
    )
    check.add_argument("book", type=Path)
    check.add_argument("--trusted-only", action="store_true", help="also fail (exit code 1) every model not signed by a trusted key")
    sign = commands.add_parser("sign", parents=[keys_folder], help="sign the models in a workbook file with your signing key")
    sign.add_argument("book", type=Path)
    sign.add_argument("--key", help="the signing key: a name in the key folder or a .key file (default: the folder's only key)")
    sign.add_argument("--model", help="only this model (default: every stored model)")
    keys = commands.add_parser("keys", help="make signing keys; list, trust and forget public keys")
    keys_commands = keys.add_subparsers(dest="keys_command", required=True)
    make = keys_commands.add_parser("make", parents=[keys_folder], help="make a signing key NAME.key (private) and NAME.pub (to share)")
    make.add_argument("name", help="the key's name: letters, digits, _ . -")
    make.add_argument("--no-trust", action="store_true", help="do not add the new key to this computer's trusted keys")
    keys_commands.add_parser("list", parents=[keys_folder], help="list your signing keys and the trusted keys")
    trust = keys_commands.add_parser("trust", parents=[keys_folder], help="trust the public key in a .pub file")
    trust.add_argument("file", type=Path, help="the .pub file its owner gave you")
    trust.add_argument("--name", help="the name to trust it under (default: the name in the file)")
    forget = keys_commands.add_parser("forget", parents=[keys_folder], help="stop trusting a key")
    forget.add_argument("name", help="the name it is trusted under (see: sheetnet keys list)")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    from .file_guard import command_scope

    args = build_parser().parse_args(argv)
    try:
        with command_scope():  # every workbook the command opened lets go of its file when it ends
            code = _dispatch(args)
        sys.stdout.flush()  # inside the try: a reader that stopped early shows here, not at exit
        return code
    except SheetnetError as error:
        print(f"sheetnet: {error}", file=sys.stderr)
        return 1
    except BrokenPipeError:  # the reader (head, less) stopped early: nothing more to say, and no traceback at exit
        import os

        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 0


def _dispatch(args: argparse.Namespace) -> int:
    if args.command == "demo":
        return run_demo(args.seed, sys.stdout, args.out, args.pictures)
    if args.command == "settings":
        from .settings import settings_table_markdown

        print(settings_table_markdown())
        return 0
    if args.command == "functions":
        return run_functions(sys.stdout)
    if args.command == "xl":
        return run_xl_setup(args, sys.stdout)
    if args.command == "serve":
        return run_serve(args, sys.stdout)
    if args.command == "calc":
        from .calc.commands import run_calc

        return run_calc(args, sys.stdout)
    if args.command == "search":
        from .search_command import run_search

        return run_search(args, sys.stdout)
    runners = {
        "train": run_train, "predict": run_predict, "formulas": run_formulas, "models": run_models, "check": run_check, "refresh": run_refresh,
        "sign": run_sign, "keys": run_keys,
    }
    return runners[args.command](args, sys.stdout)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
