"""The command line: argument parsing, the sub-commands, the live console, exit codes."""
