"""Ctrl-C while the ``bvpkit`` command is still starting.

The console script imports the package before :func:`bvpkit.io.cli.run` can catch anything, and
an interrupt in that window would end in Python's own traceback (and no JSON). So when the
running program is the ``bvpkit`` command itself, the package's first lines install
:func:`early_interrupt` as the handler of SIGINT; :func:`bvpkit.io.cli.run` hands Ctrl-C back to
Python's usual ``KeyboardInterrupt`` as soon as it can handle that. Imported as a library,
bvpkit changes no signal handling.
"""

from __future__ import annotations

import os
import signal
import sys

#: What an interrupted command says when it had not finished anything.
MESSAGE = "stopped by Ctrl-C before anything was finished to keep"
#: Exit code after Ctrl-C (the shell's convention, 128 + SIGINT); as bvpkit.status says.
EXIT_CODE = 130


def wants_json(arguments: list[str]) -> bool:
    """``--json`` among the arguments, or an abbreviation of it that argparse accepts."""
    return any(len(a) >= 3 and "--json".startswith(a) for a in arguments)


def early_interrupt(signum: int, frame: object) -> None:  # noqa: ARG001 - a signal handler's signature
    """Answer Ctrl-C during start-up as the command answers it later, and stop at once."""
    if wants_json(sys.argv[1:]):
        text, fd = '{"success": false, "status": "interrupted", "message": "' + MESSAGE + '"}\n', 1
    else:
        text, fd = f"bvpkit: interrupted: {MESSAGE}\n", 2
    try:
        os.write(fd, text.encode())
    except OSError:
        pass
    os._exit(EXIT_CODE)


def install_if_command() -> None:
    """Install :func:`early_interrupt` if this process is the ``bvpkit`` console script."""
    main = sys.modules.get("__main__")
    script = os.path.basename(getattr(main, "__file__", "") or "")
    if script.removesuffix(".exe").removesuffix("-script.py") != "bvpkit" or not sys.argv:
        return
    try:
        if signal.getsignal(signal.SIGINT) is signal.default_int_handler:
            signal.signal(signal.SIGINT, early_interrupt)
    except ValueError:  # not the main thread
        pass
