"""Sizes ptares refuses to exceed, so that a mistaken input fails at once with a clear line
instead of exhausting the machine's memory."""

#: Largest working memory (bytes) the analyses allow themselves before refusing.
MEMORY_LIMIT = 4e9

#: Largest text input (config, sweep, table, signals file) read, in bytes: refused, unread, beyond it.
FILE_LIMIT = 256 * 2**20
#: Deepest nesting of tables and arrays in a TOML or JSON input.
NESTING_LIMIT = 32
