"""The ``calcservice`` command: ``serve`` runs the HTTP service, ``compute`` calculates in-process."""

from __future__ import annotations

import argparse
import sys

from .commandline import add_compute


def _serve(args) -> int:
    from .server import serve
    serve(args.host, args.port, args.workers, args.timeout)
    return 0


def _whole(low: int, high: int | None = None):
    """An argparse type: a whole number within [low, high] (gunicorn's own refusal named no option, and a
    port beyond 65535 was a traceback)."""
    def whole(text: str) -> int:
        try:
            n = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if n < low or (high is not None and n > high):
            within = f"between {low} and {high}" if high is not None else f"at least {low}"
            raise argparse.ArgumentTypeError(f"{n} is not {within}")
        return n
    return whole


class OneLineParser(argparse.ArgumentParser):
    """A parser whose errors are one line naming the argument (the usage block buries it)."""

    def error(self, message: str):
        self.exit(2, f"{self.prog}: {message} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    from . import __version__
    p = OneLineParser(prog="calcservice", description="Binary-star orbital elements to physical "
                                "numbers with honest uncertainties.")
    p.add_argument("--version", action="version", version=f"calcservice {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    s = sub.add_parser("serve", help="run the HTTP service under gunicorn (embedded defaults)")
    s.add_argument("--host", default="127.0.0.1", help="address to bind (default 127.0.0.1)")
    s.add_argument("--port", type=_whole(0, 65535), default=8000, help="port (default 8000; 0: any free one)")
    s.add_argument("--workers", type=_whole(1), default=None, help="worker processes (default: max(2, CPUs))")
    s.add_argument("--timeout", type=_whole(1), default=None,
                   help="seconds before a stuck worker is replaced (default 60)")
    s.set_defaults(func=_serve)
    add_compute(sub)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    return args.func(args)


if __name__ == "__main__":
    sys.exit(main())
