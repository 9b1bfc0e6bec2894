"""The documented limits: how much work a recipe may ask for and how much a file may hold.

Each limit is far above what a real chain needs and far below what would exhaust a laptop.
Whatever crosses one is refused with a message naming the limit, before any work starts, so
a recipe, chain file or session file from a stranger can never make remnant run for ever or
take unbounded memory. ``docs/untrusted-files.md`` lists them for users.
"""

from __future__ import annotations

#: stages one ``[[stage]]`` entry (or ``chain.add(..., repeat=N)``) may append
MAX_REPEAT = 10_000
#: stages in one chain: a recipe's total, a chain file's or a session file's
MAX_STAGES = 10_000
#: folds of k-fold validation
MAX_FOLDS = 100
#: candidates in one audition (a grid counts every combination)
MAX_CANDIDATES = 64
#: the largest seed numpy's RandomState takes
MAX_SEED = 2**32 - 1
#: feature columns in a chain's schema
MAX_COLUMNS = 100_000
#: category levels of one column
MAX_LEVELS = 1_000_000
#: classes of a multiclass target (more is refused, with a hint to group rare levels), and of a
#: chain file's schema or LightGBM model
MAX_CLASSES = 100
#: characters in a column name
MAX_NAME_LENGTH = 4_096
#: nesting of a parameter value (a list inside a table inside a list ...)
MAX_NESTING = 32

#: bytes of one archive member once inflated, and of all members of one archive together
MAX_MEMBER_BYTES = 2 * 1024**3
MAX_ARCHIVE_BYTES = 16 * 1024**3
#: members of one archive (a session holds one per stage and track)
MAX_MEMBERS = 200_000
#: the members together may inflate to at most this many times the archive's own size, plus
#: ARCHIVE_SLACK_BYTES: real chain files compress 2 to 15 times, a compression bomb 1,000 times
MAX_INFLATION = 256
ARCHIVE_SLACK_BYTES = 64 * 1024**2
