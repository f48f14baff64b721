"""sweeprig: unattended bench characterisation of frequency mixers."""

__version__ = "0.1.0"
