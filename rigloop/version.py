"""rigloop's version, in one place (the package, the daemon's status and `rigloop --version` read it)."""

__version__ = "0.1.0"
