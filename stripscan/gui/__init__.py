"""The desktop workbench: a PySide6 + pyqtgraph window over one session model.

The model (:mod:`stripscan.gui.models.session`) is plain Python and knows nothing
of Qt; the widgets subscribe to its events and write back through its
setters, so every number on screen is the core's own.  Start it with
:func:`stripscan.gui.app.run_gui` or, on the bundled invented scenario,
:func:`stripscan.gui.app.run_demo`.
"""
