"""What each command computes: a spec made ready for work, arrangement, repair."""
