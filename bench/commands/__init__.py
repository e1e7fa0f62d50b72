"""Sub-commands of the ``zbench`` command line, one module each, exporting ``command``."""
