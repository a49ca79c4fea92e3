"""The printable HTML disclosure report."""
