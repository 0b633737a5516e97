"""The ``rollrig`` command line."""
