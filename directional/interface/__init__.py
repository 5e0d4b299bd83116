"""The ways in from outside: command line, problem files, external programs, the demo."""
