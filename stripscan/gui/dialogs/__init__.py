"""The window's dialogs."""
