"""What each ``woodlot`` command does, as Python functions: run, speedup, report, agree,
check, download, add, choose. The command line (`harness.cli`) only parses and prints."""
