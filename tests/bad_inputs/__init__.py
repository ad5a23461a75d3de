"""Generated corpus of malformed inputs (issue 9): see :mod:`tests.bad_inputs.corpus`."""
