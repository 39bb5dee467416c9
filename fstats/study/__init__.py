"""study stage of fstats (see DEVELOPERS.md)."""
