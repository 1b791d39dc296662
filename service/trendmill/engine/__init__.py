"""Pure numerics of trendmill: spec, mergeable moments, solve. Imports nothing else in the project."""
