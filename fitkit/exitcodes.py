"""Exit statuses of the fitkit command, documented in the README.

A test-fixture script can act on these without parsing any output.
"""

OK = 0             #: success; for `check` and `batch`: every board passed
FAIL = 1           #: `check`/`batch`: a board is outside its design (fail)
USAGE = 2          #: wrong command-line usage (click's own status)
INCONCLUSIVE = 3   #: `check`/`batch`: the data cannot decide pass or fail
UNUSABLE_INPUT = 4 #: a file could not be read or holds no usable step
ANALYSIS_FAILED = 5  #: a fit did not converge or is not determined by the data
NOT_DESCRIBED = 6  #: the best fit does not describe the capture (residuals far above the noise, structured)
INTERNAL = 70      #: a bug in fitkit (unexpected exception); please report it
OUTPUT_FAILED = 73 #: an output could not be written (disk full, no permission); sysexits' "cannot create"
