"""The `archive` command: a thin layer that parses options, calls one library function and renders its result."""
