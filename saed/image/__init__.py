"""Image stage: from a recorded pattern file to a measured centre, spots and 2-D lattice."""
