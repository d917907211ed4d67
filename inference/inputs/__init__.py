"""What the user gives: YAML study and scenario files, the schema, units, data tables, read once, checked and
resolved into frozen records (``Study``), plus the warnings about inputs that are valid but almost surely wrong.

May import ``physics``; never PyMC, ArviZ or matplotlib.
"""
