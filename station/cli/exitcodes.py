"""Exit codes of the `nightbench` command, so scripts and schedulers can tell outcomes apart."""

OK = 0            # run complete (UUT passed or not judged), check passed, bench answered, verify clean
FAULTED = 1       # the run faulted (bench left safe) or an analysis failed
INVALID = 2       # bad input: recipe, station, UUT or geometry file, or a wrong argument
ABORTED = 3       # the operator aborted (Ctrl-C / SIGTERM); bench left safe
INSTRUMENT = 4    # an instrument did not answer
VERIFY_FAILED = 5  # a run folder failed its integrity check
UUT_FAILED = 6    # the run (or analyze) completed and the UUT failed at least one spec limit
SAFING_FAILED = 7  # the run faulted or was aborted and safing could not make the bench safe:
                   # an instrument is left live, the operator must make it safe by hand

BY_STATE = {"complete": OK, "faulted": FAULTED, "aborted": ABORTED}
