"""Exit codes of the ``bandsolve`` command (the README's table lists them)."""

EXIT_OK, EXIT_INTERNAL, EXIT_INPUT, EXIT_PARTIAL, EXIT_FLAGGED, EXIT_DRIFT = 0, 1, 2, 3, 4, 5
