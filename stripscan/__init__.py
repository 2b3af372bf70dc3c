"""stripscan: read processed sensitometric film strips off a flatbed scanner."""

__version__ = "0.1.0"

CAUTION = (
    "Scanner readings support, not replace, a calibrated densitometer where "
    "regulations require one. Follow local regulations and the advice of the "
    "qualified medical physicist."
)
