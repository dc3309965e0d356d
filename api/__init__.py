"""rankrec's HTTP service (a thin layer over the library; filled in by a later change)."""
