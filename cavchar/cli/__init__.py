"""Command line of cavchar: ``cavchar <command> ...`` (see ``cavchar --help``)."""
