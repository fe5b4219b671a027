"""sheetnet's LibreOffice Calc extension: the cell functions live in Calc, the local server computes.

- `sheetnet.calc.build`: everything in the extension (.oxt) generated from `sheetnet.registry.REGISTRY`:
  the IDL of the cell-function interface, the function table the component reads (names and help
  texts, which the component gives the function wizard), the menu and toolbar command (Addons.xcu,
  ProtocolHandler.xcu), the passive registration (.components), the manifest and the description.
- `sheetnet/calc/sheetnet_calc.py`: the UNO component itself. It runs inside LibreOffice's own Python
  with the standard library only (no NumPy, no sheetnet import) and forwards every call to
  ``sheetnet serve``, found through the server file (`sheetnet.server_file`).
- `sheetnet/calc/sheetnet.rdb`: the compiled type library, built once with the SDK's ``unoidl-write``
  and shipped, so installing needs no SDK; ``tests/test_calc_build.py`` rebuilds it from the registry
  and requires the same bytes, so it cannot drift.
- `sheetnet.calc.commands`: ``sheetnet calc build / install / remove``.
"""
