"""fit stage of fstats (see DEVELOPERS.md)."""
