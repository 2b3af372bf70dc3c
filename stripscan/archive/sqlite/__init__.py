"""The embedded archive: one SQLite file.  The only part of stripscan that imports ``sqlite3``."""
