"""The window's pages and side panels, each over a Qt-free model."""
