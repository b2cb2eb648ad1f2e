"""The ``view`` command of the ``dic`` command line.

``dic view PATH [--no-browser] [--port N] [--config-out FILE]``
    Serve the review page of a results file (or an output folder of ``dic run``), or the
    set-up page of a folder of images without results, on 127.0.0.1, and open it in the
    default browser. Ctrl-C stops the server.
"""

from __future__ import annotations

import sys

__all__ = ["register", "run_view"]


def register(subparsers):
    """Add the ``view`` command to an argparse sub-parser collection.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers(...)``.

    Returns
    -------
    argparse.ArgumentParser
        The ``view`` parser; it sets ``func`` to :func:`run_view`.
    """
    p = subparsers.add_parser(
        "view", help="look at results, or set up an analysis, in the browser",
        description="Serve a page on this computer (127.0.0.1 only) and open it in the "
                    "default browser. For a results file or an output folder of 'dic run': "
                    "strain maps over the images, the history of any clicked point, gauge "
                    "lines and areas drawn by hand (kept, named, saved as CSV), and how well "
                    "each frame was measured. For a folder of images without results: draw "
                    "the region of interest and a scale line, check the speckle pattern, get "
                    "settings advice and save an analysis file for 'dic run --config'.",
        epilog="The address carries a random token; the page loads nothing from elsewhere and "
               "the results file is opened read-only. Ctrl-C stops the server. Exit codes: 0 "
               "stopped, 2 bad input.")
    p.add_argument("path", metavar="PATH",
                   help="results file, output folder of 'dic run', or a folder of images")
    p.add_argument("--no-browser", action="store_true",
                   help="only print the page's address; do not open a browser")
    p.add_argument("--port", type=int, default=0, metavar="N",
                   help="port to listen on (default: a free one)")
    p.add_argument("--config-out", metavar="FILE",
                   help="set-up page: where to save the analysis file (default: analysis.toml "
                        "in the images' folder)")
    p.set_defaults(func=run_view)
    return p


def run_view(args) -> int:
    """Run ``dic view`` until interrupted; returns 0."""
    from dic.view.server import ViewServer, source_for

    if not 0 <= args.port <= 65535:
        raise ValueError(f"--port: {args.port} is not a port number; give 0 to 65535 (0 picks "
                         "a free one)")
    server = ViewServer(source_for(args.path, args.config_out), args.port)
    try:  # from here on, Ctrl-C at any moment stops the server cleanly
        print(f"dic view: {server.url}", flush=True)
        print("dic view: press Ctrl-C to stop", file=sys.stderr, flush=True)
        if not args.no_browser:
            import webbrowser

            webbrowser.open(server.url)
        server.serve_forever()
    except KeyboardInterrupt:
        print("dic view: stopped", file=sys.stderr)
    finally:
        server.stop()
    return 0
