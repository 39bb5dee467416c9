"""report stage of fstats (see DEVELOPERS.md)."""
