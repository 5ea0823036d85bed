"""Guards at the edges of a run: reading the user's files safely; whose temporaries are whose.

A leaf room (it imports nothing of :mod:`render`): :mod:`.reading` reads input
files (regular files only, never blocking, with a byte cap); :mod:`.runs` tags
temporary names with the run that made them, so dead runs' leftovers can be swept.
"""
