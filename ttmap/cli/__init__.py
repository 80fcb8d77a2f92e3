"""The ``ttmap`` command line: thin wrappers over the library."""
