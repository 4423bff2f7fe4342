"""Defaults and names of the batch that its command line needs without importing the engine.

Kept apart so that ``rutwise --help`` and ``rutwise analyze`` do not pay for importing the
batch machinery. Nothing but constants here.
"""

#: environment variable naming an existing Dask scheduler (tcp://host:port)
SCHEDULER_ENV = "RUTWISE_SCHEDULER"
#: layers with more ruts than this are cut into work units of about this many ruts
DEFAULT_UNIT_RUTS = 400
#: exit status of a batch in which some inputs failed (the rest were merged and reported)
EXIT_SOME_FAILED = 3
