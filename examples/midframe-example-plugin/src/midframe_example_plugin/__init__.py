"""An example third-party operator package for midframe.

It declares one operator, ``example-vignette``, registered through the ``midframe.operators``
entry-point group in this package's ``pyproject.toml``. Importing this package does not import
the operator module: midframe loads ``midframe_example_plugin.vignette`` the first time a graph
(or ``midframe ops``) asks for the operator.
"""

__version__ = "0.1.0"
