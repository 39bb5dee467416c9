"""group stage of fstats (see DEVELOPERS.md)."""
