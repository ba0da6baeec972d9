"""Statistics and fits: Stat records, localization-length fits, momentum peaks, closed forms."""
