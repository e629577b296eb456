"""The data stage: the word table (format, validator, pages), its sources and importers."""
