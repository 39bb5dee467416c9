"""simulate stage of fstats (see DEVELOPERS.md)."""
