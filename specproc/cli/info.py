"""``specproc info``: placeholder, to be written with the loaders (issue 2)."""

COMMANDS: list = []
