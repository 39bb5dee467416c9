"""flow stage of fstats (see DEVELOPERS.md)."""
