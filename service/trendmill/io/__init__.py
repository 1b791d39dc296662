"""I/O shells of trendmill: plan a source, scan partitions, parse filters, write results."""
