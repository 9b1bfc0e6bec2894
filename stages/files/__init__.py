"""Third floor: the files a chain lives in (chain file, TOML recipe, workbench session).

Imports the core and the second floor (a recipe replays auditions and grows), never the bridges.
"""
