"""Run the service under gunicorn from Python, with embedded defaults (no configuration file)."""

from __future__ import annotations

import gc
import logging
import os

from gunicorn.app.base import BaseApplication

DEFAULTS = {
    "bind": "127.0.0.1:8000",
    "workers": max(2, os.cpu_count() or 1),
    "worker_class": "sync",          # CPU-bound numpy work: one request per process at a time
    "timeout": 60,                   # last line of defence: a worker stuck this long is killed and replaced
    "graceful_timeout": 30,          # on HUP/TERM, in-flight requests get this long to finish
    "keepalive": 5,
    "max_requests": 10000,           # recycle workers now and then (memory fragmentation)
    "max_requests_jitter": 1000,
    "limit_request_line": 8190,
    "limit_request_fields": 100,
    "preload_app": True,             # import numpy/astropy once in the master; workers fork ready
    "accesslog": None,               # the app logs each request itself, with its request id and no body
    "errorlog": "-",
    "loglevel": "info",
}


class Server(BaseApplication):
    def __init__(self, options: dict, config: dict | None = None):
        self.options = {**DEFAULTS, **{k: v for k, v in options.items() if v is not None}}
        self.app_config = config
        super().__init__()

    def load_config(self):
        for key, value in self.options.items():
            if key in self.cfg.settings:
                self.cfg.set(key, value)

    def load(self):
        from . import create_app
        logging.basicConfig(level=logging.INFO, format="%(asctime)s %(process)d %(name)s %(message)s")
        app = create_app(self.app_config)
        # the app and all it imported (numpy, scipy, astropy: ~10^5 objects) live as long as the
        # process: frozen, the collector's full passes no longer walk them again and again (a
        # catalogue request allocates enough to trigger several), and the forked workers share
        # their pages instead of copying them as the collector touches them
        gc.freeze()
        return app


def serve(host: str = "127.0.0.1", port: int = 8000, workers: int | None = None, timeout: int | None = None,
          **extra) -> None:
    Server({"bind": f"{host}:{port}", "workers": workers, "timeout": timeout, **extra}).run()
