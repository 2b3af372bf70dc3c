"""Pure computational core: numpy, scipy and scikit-image only (no Qt, no sqlite)."""
