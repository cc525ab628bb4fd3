"""One module per ``gapwatch`` subcommand."""
