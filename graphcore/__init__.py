"""midframe's engine: graph model, validation, evaluation at samples, cache, executors, CLI."""

__version__ = "0.1.0"
