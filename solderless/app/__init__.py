"""Front ends of the command line: ``solderless`` and its commands, the play
console, the demo report."""
