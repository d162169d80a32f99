"""Sizes ptares refuses to exceed, so that a mistaken input fails at once with a clear line
instead of exhausting the machine's memory; and the rule every pulsar and file name follows."""

import re

#: Largest working memory (bytes) the analyses allow themselves before refusing.
MEMORY_LIMIT = 4e9

#: Largest text input (config, sweep, table, signals file) read, in bytes: refused, unread, beyond it.
FILE_LIMIT = 256 * 2**20
#: Deepest nesting of tables and arrays in a TOML or JSON input.
NESTING_LIMIT = 32

#: TOAs of one pulsar, and of all pulsars together (about 0.4 GB per array of them).
MAX_TOAS = 1_000_000
MAX_TOTAL_TOAS = 50_000_000

#: A name usable as an HDF5 group and a file-name part: letters, digits and ``_ + - .``.
NAME_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9_+\-.]{0,63}")
