"""The ``cluttersim`` executable: interrupts during start-up (the imports take a second or two) end
with one line and exit 130, like interrupts later on (:func:`cli.main.main`)."""

import signal
import sys


def _interrupt(signum, frame):
    raise KeyboardInterrupt


def main(argv=None):
    signal.signal(signal.SIGTERM, _interrupt)
    try:
        from cli.main import main as run
    except KeyboardInterrupt:
        sys.stderr.write("cluttersim: interrupted while starting; nothing was done\n")
        sys.exit(130)
    run(argv)


if __name__ == "__main__":  # pragma: no cover
    main()
