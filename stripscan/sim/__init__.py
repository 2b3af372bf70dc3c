"""The simulator of scanned strips and tablets, and the invented demo scenario.

Test and demo tooling, not the core: nothing in ``stripscan.core`` imports it."""
