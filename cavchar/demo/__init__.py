"""The invented demo scenario and the command that runs the whole job on it."""
