"""Wind sources, aircraft-derived observations and the Gaussian-process wind field."""
