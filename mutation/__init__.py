"""`make mutate`: mutation testing of the code that computes scores and restores runs."""
