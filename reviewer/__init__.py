"""reviewer: find, confirm and time-stamp growth events in long microscopy movies.

Layers, bottom to top (each imports only those below it):

    reviewer.movie     reading movies of any container, frame by frame or in blocks
    reviewer.detect    one streaming pass that scores frames and proposes candidate events
    reviewer.store     the annotation journal, sessions and the CSV event table
    reviewer.kinetics  waiting times, rates and growth velocity from the event table
    reviewer.tui       the Textual review app (the only place that imports textual)

`reviewer.commands` and `reviewer.cli` are the headless command line on top of the first four.
"""

__version__ = "0.1.0"
