"""One module per sub-command; each is a thin layer over its stage."""
