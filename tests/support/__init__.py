"""Helpers shared by several test modules (worlds, stores, mail doubles, snapshots).

Test modules import helpers from here, never from one another; fixtures stay in the
``conftest.py`` files and build on these helpers.
"""
