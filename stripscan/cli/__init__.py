"""The command line: one module per command group (``main`` builds the parser and runs the scan commands).

Nothing else in stripscan imports this package; the command line may start the window."""
