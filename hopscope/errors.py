"""Exit codes of the command line, and how it reports errors.

Stages raise ``ValueError`` (bad values, bad file contents) or ``OSError`` (missing/unreadable files) with a
message that names the file or argument; the CLI turns those into one line on stderr and exit code 2.
"""

from __future__ import annotations

EXIT_OK = 0
EXIT_UNEXPECTED = 1
EXIT_BAD_INPUT = 2
#: After Ctrl-C: 128 + SIGINT, the shells' convention. # common practice, no published source
EXIT_INTERRUPTED = 130
