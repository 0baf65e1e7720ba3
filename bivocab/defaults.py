"""Defaults of command options that are not recipe keys, in a module light enough for the
command line to import at start-up (worker processes re-import the command's main module)."""

# Word n-grams of at least this many words shared by a probe item and the training text count
# as contamination.
DEFAULT_NGRAM = 8
