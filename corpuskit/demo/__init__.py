"""The invented demo scenario (language, places, dialects, sources, people) and its generator."""
