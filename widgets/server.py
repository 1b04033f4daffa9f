"""The Voila server ``contrast-aid serve`` runs: one dashboard, sessions that end, locked down.

:class:`ContrastAidVoila` is Voila's own application (``voila.app.Voila``) with these changes, all made
where Voila builds its tornado application, so nothing of Voila is patched in place:

* **One page starts kernels.** In single-notebook mode Voila routes every path (``/(.*)``) to its page
  handler. Here only the base URL itself renders the dashboard; any other path is a plain 404 from
  :class:`NotFound`, which starts nothing. The identity provider's ``/login`` and ``/logout`` (which
  answered 500 with a traceback, there being no login template) are dropped: a department puts
  authentication in front of the server. ``/voila/templates/...`` answers 404, not 500, for a path that
  is not ``<template>/static/<file>``.
* **A health check.** ``GET {base_url}contrast-aid/health`` answers 200 with ``{"status": "ok",
  "kernels": N}`` (N = running kernels); it starts no kernel and needs no cookie.
* **Sessions that end.** The page's ``beforeunload`` beacon (``POST voila/api/shutdown/<kernel>``) sends
  the ``_xsrf`` cookie value as its form field, but Voila never set that cookie, so every shutdown was
  refused (403) and the kernel ran on. :class:`DashboardHandler` sets the cookie when it serves the page.
  Kernels whose page has gone without the beacon (a killed browser, a lost network) are culled by the
  kernel manager (``MappingKernelManager.cull_idle_timeout`` / ``cull_interval``, ``cull_connected``
  False: a kernel a browser is still connected to is never culled); :func:`widgets.serve.voila_arguments`
  sets them.
* **Headers.** :class:`SecurityHeaders` (a tornado output transform, so it covers every response: pages,
  static files, errors) sets the Content-Security-Policy, ``X-Content-Type-Options: nosniff`` and
  ``Referrer-Policy: no-referrer``, and removes tornado's ``Server: TornadoServer/x`` header.
* **Logs.** The access log is ours (:func:`log_request`): method, path without its query string (a
  shared link carries the case in it) and with kernel ids replaced by ``<kernel>``, status, time. A log
  record factory replaces kernel ids and query strings in every other log message (and traceback) of
  the server process too.

The XSRF check stays on; the ``_xsrf`` cookie is ``SameSite=Strict`` (and ``Secure`` with ``--secure-
cookies``, for a server reached over TLS at a reverse proxy).
"""

from __future__ import annotations

import functools
import json
import logging
import re

import tornado.web
from jupyter_server.utils import url_path_join
from traitlets import Bool, Unicode
from jupyter_server.services.kernels.kernelmanager import AsyncMappingKernelManager
from voila.app import Voila
from voila.static_file_handler import AllowListFileHandler
from voila.static_file_handler import TemplateStaticFileHandler
from voila.tornado.handler import TornadoVoilaHandler

HEALTH_PATH = "contrast-aid/health"
KERNEL_ID = re.compile(r"[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}", re.IGNORECASE)

#: The strictest policy the page works under (measured in headless Chromium, see README): Voila's page
#: boots from inline <script> elements ('unsafe-inline' for scripts; without it nothing renders), and
#: the widgets and our CSS use <style> elements and style attributes ('unsafe-inline' for styles;
#: without it the page loses its layout). 'unsafe-eval' is not needed. plotly draws from data: and
#: blob: URLs. Nothing is loaded from another origin; only the same origin may frame the page.
CONTENT_SECURITY_POLICY = "; ".join([
    "default-src 'self'",
    "script-src 'self' 'unsafe-inline'",
    "style-src 'self' 'unsafe-inline'",
    "img-src 'self' data: blob:",
    "font-src 'self' data:",
    "connect-src 'self'",
    "worker-src 'self' blob:",
    "object-src 'none'",
    "base-uri 'self'",
    "form-action 'self'",
    "frame-ancestors 'self'",
])
SECURITY_HEADERS = {
    "Content-Security-Policy": CONTENT_SECURITY_POLICY,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
}


#: a URL's query string (``?exam=...&creatinine=...``): a shared link carries the case in it, and tornado
#: writes a request's full URI into its warnings and uncaught-exception reports
QUERY = re.compile(r"\?[^\s'\"<>]*=[^\s'\"<>]*")


def redact(text: str) -> str:
    """``text`` with every kernel id replaced by ``<kernel>`` and every query string by ``?<query>``."""
    return QUERY.sub("?<query>", KERNEL_ID.sub("<kernel>", text))


_formatter = logging.Formatter()


class _RedactingRecord(logging.LogRecord):
    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        # a traceback is formatted once, here, so the handler's formatter prints the redacted text
        if self.exc_info:
            self.exc_text = redact(_formatter.formatException(self.exc_info))
        if self.stack_info:
            self.stack_info = redact(self.stack_info)

    def getMessage(self) -> str:  # noqa: N802 (logging's name)
        return redact(super().getMessage())


def install_log_redaction() -> None:
    """Every log record made in this process from now on has kernel ids replaced in its message."""
    logging.setLogRecordFactory(_RedactingRecord)


access_log = logging.getLogger("contrast_aid.access")


def log_request(handler: tornado.web.RequestHandler) -> None:
    """Tornado's ``log_function``: one line per request, no query string, no kernel id."""
    status = handler.get_status()
    request = handler.request
    level = logging.INFO if status < 400 else logging.WARNING if status < 500 else logging.ERROR
    access_log.log(level, "%d %s %s %.1f ms", status, request.method, redact(request.path),
                   1000.0 * request.request_time())


class SecurityHeaders(tornado.web.OutputTransform):
    """Security headers on every response, and no ``Server`` header."""

    def __init__(self, headers: dict[str, str], request):
        super().__init__(request)
        self.headers = headers

    def transform_first_chunk(self, status_code, headers, chunk, finishing):
        headers.pop("Server", None)
        for name, value in self.headers.items():
            headers[name] = value
        return status_code, headers, chunk


class NotFound(tornado.web.RequestHandler):
    """A plain 404 for every path the app does not serve; starts nothing, logs no traceback."""

    def prepare(self):
        raise tornado.web.HTTPError(404)

    def write_error(self, status_code, **kwargs):
        self.set_header("Content-Type", "text/plain; charset=utf-8")
        self.finish(f"{status_code} {self._reason}\n")


class HealthHandler(tornado.web.RequestHandler):
    """``GET contrast-aid/health``: 200 and the number of running kernels; starts no kernel."""

    def get(self):
        kernels = len(self.settings["kernel_manager"].list_kernel_ids())
        self.set_header("Content-Type", "application/json")
        self.set_header("Cache-Control", "no-store")
        self.finish(json.dumps({"status": "ok", "kernels": kernels}))

    def head(self):
        self.set_header("Cache-Control", "no-store")
        self.finish()


class DashboardHandler(TornadoVoilaHandler):
    """Voila's page handler on the base URL only; sets the ``_xsrf`` cookie the tab-close beacon sends."""

    @tornado.web.authenticated
    async def get(self, path=None):
        self.xsrf_token  # noqa: B018 (reading it sets the cookie)
        await super().get(path=None)


class TemplateFiles(TemplateStaticFileHandler):
    """Voila's template static files; a path not of the form ``<template>/static/<file>`` is a 404."""

    def parse_url_path(self, path):
        try:
            return super().parse_url_path(path)
        except (AssertionError, ValueError):
            raise tornado.web.HTTPError(404) from None

    @classmethod
    def get_absolute_path(cls, root, path):
        try:
            return super().get_absolute_path(root, path)
        except (AssertionError, ValueError):
            raise tornado.web.HTTPError(404) from None


class KernelManager(AsyncMappingKernelManager):
    """Jupyter's kernel manager; the cull check skips a kernel its page has just shut down (jupyter_server
    2.x logs a KeyError traceback when a tab-close shutdown and a cull check cross)."""

    async def cull_kernel_if_idle(self, kernel_id):
        if kernel_id not in self._kernels:
            return None
        return await super().cull_kernel_if_idle(kernel_id)


class ContrastAidVoila(Voila):
    """Voila serving the one dashboard notebook, as described in the module docstring."""

    name = "voila"  # Voila's config files and settings keys keep their names
    secure_cookies = Bool(False, config=True,
                          help="Mark the cookies Secure: the server is reached over TLS (at a reverse proxy).")

    content_security_policy = Unicode(
        CONTENT_SECURITY_POLICY, config=True,
        help="The Content-Security-Policy of every response (e.g. to let a named intranet page frame it).")

    @property
    def security_headers(self) -> dict[str, str]:
        return {**SECURITY_HEADERS, "Content-Security-Policy": self.content_security_policy}

    def init_settings(self):
        settings = super().init_settings()
        # The session (identity) cookie and the _xsrf cookie: SameSite=Strict, Secure over TLS.
        same_site = {"samesite": "Strict", **({"secure": True} if self.secure_cookies else {})}
        self.identity_provider.cookie_options = {**self.identity_provider.cookie_options, **same_site}
        if self.secure_cookies:
            self.identity_provider.secure_cookie = True
        headers = dict(settings.get("headers", {}))
        headers.update(self.security_headers)
        settings["headers"] = headers
        settings["log_function"] = log_request
        settings["default_handler_class"] = NotFound
        settings["xsrf_cookie_kwargs"] = {**settings.get("xsrf_cookie_kwargs", {}), **same_site}
        settings["xsrf_cookies"] = True
        return settings

    def init_handlers(self):
        if not self.notebook_path:
            raise ValueError("contrast-aid serves one notebook; give its path")
        handlers = []
        for spec in super().init_handlers():
            pattern, handler = spec[0], spec[1]
            if handler is TornadoVoilaHandler:  # Voila's catch-all '/(.*)': the base URL only
                handlers.append((self.server_url, DashboardHandler, *spec[2:]))
            elif handler is TemplateStaticFileHandler:
                handlers.append((pattern, TemplateFiles, *spec[2:]))
            elif pattern.rstrip("/").endswith(("/login", "/logout")) or handler is AllowListFileHandler:
                continue  # no login page; no files from the notebook's folder (the page needs none)
            else:
                handlers.append(spec)
        handlers.insert(0, (url_path_join(self.server_url, HEALTH_PATH), HealthHandler))
        return handlers

    def start(self):
        install_log_redaction()
        _route_access_log(self.log)
        super().start()

    def listen(self):
        self.app.transforms.append(functools.partial(SecurityHeaders, self.security_headers))
        super().listen()


def _route_access_log(app_log: logging.Logger) -> None:
    """Send our access log lines through Voila's log handler (same format, same stream)."""
    access_log.propagate = False
    access_log.setLevel(logging.INFO)
    for h in app_log.handlers:
        access_log.addHandler(h)


main = ContrastAidVoila.launch_instance
