"""Jobs: thin compositions of load, build, solve, check and report."""
