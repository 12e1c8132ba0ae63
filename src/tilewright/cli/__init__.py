"""Command-line entry points: ``tile-out`` and the ``tilewright`` umbrella command."""
