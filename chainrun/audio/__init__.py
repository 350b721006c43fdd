"""Everything that knows a container, a subtype or libsndfile."""
