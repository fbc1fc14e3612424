"""Built-in midframe operators. Each registers through the ``midframe.operators`` entry points."""
