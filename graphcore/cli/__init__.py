"""The ``midframe`` command line."""
