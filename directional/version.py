"""The package's version, in one place: the package, the journal and the command line read it."""

VERSION = "0.1.0"
