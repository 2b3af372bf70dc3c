"""What joins the core and the archive: work over many files, QC log, comparison sets (no Qt)."""
