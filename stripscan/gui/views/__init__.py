"""Widgets that show one thing: the scan, a curve, a trend, a table."""
