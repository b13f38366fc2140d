"""What each command computes: a spec made ready for work, arrangement, repair."""

#: The ways ``arrange`` can place the units: ``auto`` is the search, the others are the
#: baselines it is compared with. Here, free of numpy, so the command's help can list them
#: without loading the search.
METHODS = ("auto", "clustered", "interdigitated", "mirrored", "milp")
