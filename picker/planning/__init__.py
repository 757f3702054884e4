"""Planning: supplier catalogs and the reorder plan (a mixed-integer program)."""
