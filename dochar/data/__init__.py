"""The data stage: the word table, its sources and the importers into it."""
