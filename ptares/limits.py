"""Sizes ptares refuses to exceed, so that a mistaken input fails at once with a clear line
instead of exhausting the machine's memory."""

#: Largest working memory (bytes) the analyses allow themselves before refusing.
MEMORY_LIMIT = 4e9
