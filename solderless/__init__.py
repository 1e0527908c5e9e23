"""Solderless: hear an analog circuit before you build it.

Packages: ``engine`` (circuit model, devices, solver, analyses, live host),
``gui`` (the desktop workbench) and ``app`` (the command line, the play
console, the demo report and the other commands).  The engine imports no
front end.
"""
__version__ = "0.1.0"
