"""The schema revisions (Alembic scripts in ``versions/``).

``HEAD_REVISION`` names the newest one, so that opening a database can check its revision with
one plain query and without loading Alembic; a test holds it equal to the head of the scripts
(add a revision, then raise it here).
"""

HEAD_REVISION = "0007"
VERSION_TABLE = "alembic_version"  # Alembic's default name for its revision record
