"""One screen per file, each with its .tcss beside it."""
