"""bandwright's HTTP service and command line."""
