"""Importers: each converts one source format into the word table (dochar.data.word_table)."""
