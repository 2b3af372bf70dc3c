"""What joins the core and the archive: the processor QC log, crossovers, comparison sets,
chart data and the demo builders.  Qt-free."""
