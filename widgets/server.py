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
  "kernels": N, "pooled": P}`` (N = pages' running kernels, P = started kernels ready in the pool); it
  starts no kernel and needs no cookie.
* **Sessions that end.** The page's ``beforeunload`` beacon (``POST voila/api/shutdown/<kernel>``) sends
  the ``_xsrf`` cookie value as its form field, but Voila never set that cookie, so every shutdown was
  refused (403) and the kernel ran on. :class:`DashboardHandler` sets the cookie when it serves the page.
  Kernels whose page has gone without the beacon (a killed browser, a lost network) are culled by the
  kernel manager (``MappingKernelManager.cull_idle_timeout`` / ``cull_interval``, ``cull_connected``
  False: a kernel a browser is still connected to is never culled); :func:`widgets.serve.voila_arguments`
  sets them.
* **Sessions that start.** A kernel no browser has connected to yet (its page is still loading) is culled
  only after ``connect_grace_seconds`` idle (default :data:`CONNECT_GRACE_S`), and a small pool of
  kernels started ahead of requests (``--ContrastAidKernelManager.pool_size``) spares a page opened after
  a quiet moment the kernel's start and the dashboard's imports: :class:`ContrastAidKernelManager`.
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

import asyncio
import functools
import json
import logging
import os
import re
import time

import tornado.ioloop
import tornado.web
from jupyter_server._tz import utcnow
from jupyter_server.utils import url_path_join
from traitlets import Bool, Integer, Unicode
from jupyter_server.services.kernels.kernelmanager import AsyncMappingKernelManager
from voila.app import Voila
from voila.static_file_handler import AllowListFileHandler
from voila.static_file_handler import TemplateStaticFileHandler
from voila.tornado.handler import TornadoVoilaHandler

HEALTH_PATH = "contrast-aid/health"
#: a kernel no browser has connected to yet is culled only after this long idle (its page may still be loading)
CONNECT_GRACE_S = 120
#: the pool refills only once no page has been served, and no kernel has sent a message, for this long
POOL_QUIET_S = 2.0
#: most seconds a pooled kernel may take to run its preload, and to take a page's environment
POOL_PRELOAD_TIMEOUT_S = 120.0
POOL_EXEC_TIMEOUT_S = 5.0
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
        km = self.settings["kernel_manager"]
        sessions = km.session_count() if hasattr(km, "session_count") else len(km.list_kernel_ids())
        ready = km.pool_ready() if hasattr(km, "pool_ready") else 0
        self.set_header("Content-Type", "application/json")
        self.set_header("Cache-Control", "no-store")
        self.finish(json.dumps({"status": "ok", "kernels": sessions, "pooled": ready}))

    def head(self):
        self.set_header("Cache-Control", "no-store")
        self.finish()


class DashboardHandler(TornadoVoilaHandler):
    """Voila's page handler on the base URL only; sets the ``_xsrf`` cookie the tab-close beacon sends."""

    @tornado.web.authenticated
    async def get(self, path=None):
        self.xsrf_token  # noqa: B018 (reading it sets the cookie)
        km = self.kernel_manager
        counted = hasattr(km, "page_started")
        if counted:  # the kernel pool refills only between pages
            km.page_started()
        try:
            await super().get(path=None)
        finally:
            if counted:
                km.page_done()


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


class ContrastAidKernelManager(AsyncMappingKernelManager):
    """Jupyter's kernel manager, with a cull check that leaves alone a kernel still starting, a kernel whose
    page has not connected yet (within ``connect_grace_seconds``) and a pooled kernel, and an optional pool
    of kernels started ahead of requests (:attr:`pool_size`).

    **Culling.** jupyter_server culls a kernel with no browser connected once it has been idle
    ``cull_idle_timeout``. A page's kernel is idle from the moment its notebook has run until the page's
    script has loaded and connected; on a busy machine that took more than 10 s, and pages were lost to
    the culler before they ever showed. A kernel no browser has connected to yet is therefore culled only
    once it has been idle ``max(cull_idle_timeout, connect_grace_seconds)`` (default
    :data:`CONNECT_GRACE_S`, the default cull time: so only a shorter cull time is affected; a page fetched
    by a client that never connects, such as ``curl``, keeps its kernel that long). The cull check also skips a kernel
    still starting (jupyter_server 2.x logged a TraitError traceback for one) or just shut down by its
    page (a KeyError traceback when a tab-close shutdown and a cull check crossed).

    **The pool** (``pool_size`` > 0; 0 here, ``contrast-aid serve`` keeps ``serve.POOL_SIZE``). That many
    kernels are kept started, with ``pool_preload`` run in each (imports only: nothing of any user is in a
    pooled kernel). A page request takes a ready one if there is one, and gets the request's environment
    (``QUERY_STRING`` with the shared link's case, Voila's ``SCRIPT_NAME``, ``SERVER_*`` and ``VOILA_*``
    values) written into the kernel's ``os.environ`` before its notebook runs, so the page is the same as
    from a fresh kernel; the app reads them when the notebook builds it. A request never waits for the
    pool: with no ready kernel it starts its own, as without a pool; a pooled kernel that does not take
    the environment within :data:`POOL_EXEC_TIMEOUT_S` is shut down and the request starts its own. The
    pool is filled when the server starts and refilled in the background one kernel at a time, and only
    once no page is being served and no kernel has sent a message for :data:`POOL_QUIET_S`, so that
    refilling does not take CPU from pages being opened or used. Pooled kernels are never culled, are
    not counted as sessions by the health check (it reports the ready ones as ``pooled``), and are shut down with
    the server. Voila's own preheating (``preheat_kernel``) is not used: it runs the notebook before any
    request, so the app never saw the request's shared link.
    """

    connect_grace_seconds = Integer(
        CONNECT_GRACE_S, config=True,
        help="A kernel no browser has connected to yet is culled only once idle this long (or the cull time, "
             "if longer): its page may still be loading.")
    pool_size = Integer(0, config=True, help="Kernels kept started ahead of page requests (0: no pool).")
    pool_preload = Unicode("", config=True,
                           help="Python code a pooled kernel runs once started (imports; nothing of a user).")

    def __init__(self, **kwargs):
        super().__init__(**kwargs)
        self._ever_connected: set[str] = set()
        self._pool: list[str] = []  # ready pooled kernels, oldest first
        self._pooled: set[str] = set()  # pooled kernels, ready or still starting
        self._pool_key: tuple | None = None  # (kernel_name, path) the pool's kernels were started for
        self._filling: asyncio.Task | None = None
        self._pages = 0  # page requests being served now
        self._last_page = 0.0  # time.monotonic() when the last one ended

    # ---- culling
    def notify_connect(self, kernel_id):
        self._ever_connected.add(kernel_id)
        super().notify_connect(kernel_id)

    async def cull_kernel_if_idle(self, kernel_id):
        kernel = self._kernels.get(kernel_id)
        if kernel is None or kernel_id in self._pooled:
            return None
        last = kernel._trait_values.get("last_activity") if hasattr(kernel, "_trait_values") else None
        if last is None:  # still starting
            return None
        if kernel_id not in self._ever_connected:
            idle = (utcnow() - last).total_seconds()
            if idle < max(self.cull_idle_timeout, self.connect_grace_seconds):
                return None
        return await super().cull_kernel_if_idle(kernel_id)

    async def _async_shutdown_kernel(self, kernel_id, now=False, restart=False):
        try:
            return await super()._async_shutdown_kernel(kernel_id, now=now, restart=restart)
        finally:
            if not restart:
                self._ever_connected.discard(kernel_id)
                self._pooled.discard(kernel_id)
                if kernel_id in self._pool:
                    self._pool.remove(kernel_id)

    shutdown_kernel = _async_shutdown_kernel

    def session_count(self) -> int:
        """Running kernels that belong to pages (pooled ones, ready or starting, not counted)."""
        return len([k for k in self.list_kernel_ids() if k not in self._pooled])

    def pool_ready(self) -> int:
        """Pooled kernels ready to be taken by a page."""
        return len([k for k in self._pool if k in self._kernels])

    # ---- pages being served (the pool refills only between them)
    def page_started(self) -> None:
        self._pages += 1

    def page_done(self) -> None:
        self._pages = max(0, self._pages - 1)
        self._last_page = time.monotonic()

    def _quiet(self) -> bool:
        """No page being served, and none served nor any kernel message for POOL_QUIET_S."""
        idle = (utcnow() - self.last_kernel_activity).total_seconds()
        return not self._pages and time.monotonic() - self._last_page >= POOL_QUIET_S and idle >= POOL_QUIET_S

    # ---- the pool
    async def _async_start_kernel(self, *, kernel_id=None, path=None, **kwargs):
        if self.pool_size <= 0 or kernel_id is not None:
            return await super()._async_start_kernel(kernel_id=kernel_id, path=path, **kwargs)
        key = (kwargs.get("kernel_name"), path)
        if key != self._pool_key:  # the first request (or another notebook): the pool follows it
            self._pool_key = key
            for old in list(self._pool):
                self._pool.remove(old)
                asyncio.ensure_future(self.shutdown_kernel(old, now=True))
        taken = await self._take(kwargs.get("env") or {})
        if taken is None:
            taken = await super()._async_start_kernel(path=path, **kwargs)
        self.fill_pool()
        return taken

    start_kernel = _async_start_kernel

    async def _take(self, env: dict) -> str | None:
        """A ready pooled kernel, given the request's environment; None when there is none."""
        code = environment_code(env, os.environ)
        while self._pool:
            kernel_id = self._pool.pop(0)
            if kernel_id not in self._kernels:
                continue
            if await self._run(kernel_id, code):
                self._pooled.discard(kernel_id)
                self._kernels[kernel_id].last_activity = utcnow()
                self.log.info("Kernel taken from the pool: %s", kernel_id)
                return kernel_id
            self.log.warning("pooled kernel %s did not take its page's environment; shutting it down", kernel_id)
            asyncio.ensure_future(self.shutdown_kernel(kernel_id, now=True))
        return None

    async def _run(self, kernel_id: str, code: str, timeout: float = POOL_EXEC_TIMEOUT_S) -> bool:
        """Run ``code`` in the kernel silently (no output, no history); True when it ran without error."""
        kc = self.get_kernel(kernel_id).client()
        kc.start_channels()
        try:
            reply = await kc.execute(code, silent=True, store_history=False, allow_stdin=False, reply=True,
                                     timeout=timeout)
            content = reply.get("content", {})
            if content.get("status") != "ok":
                self.log.warning("pooled kernel %s: %s %s", kernel_id, content.get("ename"), content.get("evalue"))
            return content.get("status") == "ok"
        except Exception as exc:  # a dead kernel, a timeout
            self.log.warning("pooled kernel %s: %s %s", kernel_id, type(exc).__name__, exc)
            return False
        finally:
            kc.stop_channels()

    def fill_pool(self, kernel_name: str | None = None, path: str | None = None) -> None:
        """Start refilling the pool in the background (for ``kernel_name`` and ``path`` the first time)."""
        if self.pool_size <= 0:
            return
        if self._pool_key is None and kernel_name is not None:
            self._pool_key = (kernel_name, path)
        if self._pool_key is not None and (self._filling is None or self._filling.done()):
            self._filling = asyncio.ensure_future(self._fill())

    async def _fill(self) -> None:
        while len(self._pooled) < self.pool_size and self._pool_key is not None:
            while not self._quiet():
                await asyncio.sleep(0.25)
            key = self._pool_key
            try:
                kernel_id = await super()._async_start_kernel(kernel_name=key[0], path=key[1], env=dict(os.environ))
            except Exception as exc:
                self.log.warning("could not start a pooled kernel: %s", type(exc).__name__)
                return
            self._pooled.add(kernel_id)
            if self.pool_preload and not await self._run(kernel_id, self.pool_preload, POOL_PRELOAD_TIMEOUT_S):
                self.log.warning("pooled kernel %s: preload failed; the kernel is used without it", kernel_id)
            if kernel_id not in self._kernels:
                self._pooled.discard(kernel_id)
                continue
            if key != self._pool_key:
                self._pooled.discard(kernel_id)
                await self.shutdown_kernel(kernel_id, now=True)
                continue
            self._pool.append(kernel_id)
            self.log.info("Kernel ready in the pool: %s (%d of %d)", kernel_id, len(self._pool), self.pool_size)


def environment_code(env: dict, base) -> str:
    """Python code that sets, in a pooled kernel started with the environment ``base``, the variables of
    ``env`` (a page request's kernel environment) that differ from it. Keys and values go in as plain
    string literals (``repr``; Voila's keys are a str Enum), so nothing of the request is run as code."""
    updates = {"".join(k): "".join(v) for k, v in env.items()
               if isinstance(k, str) and isinstance(v, str) and base.get(k) != v}
    return f"import os as _ca_os\n_ca_os.environ.update({updates!r})\ndel _ca_os"


#: the name ``serve`` configured before the pool came (``--VoilaConfiguration.multi_kernel_manager_class``)
KernelManager = ContrastAidKernelManager


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
        if getattr(self.kernel_manager, "pool_size", 0) > 0:  # fill the pool once the server runs
            tornado.ioloop.IOLoop.current().add_callback(
                self.kernel_manager.fill_pool, _kernel_name(self.notebook_path),
                os.path.dirname(os.path.relpath(self.notebook_path, self.root_dir)))
        super().listen()


def _kernel_name(notebook_path: str) -> str:
    """The kernel the notebook asks for (its metadata), as Voila starts it; python3 if it names none."""
    try:
        with open(notebook_path, encoding="utf-8") as fh:
            return json.load(fh)["metadata"]["kernelspec"]["name"]
    except (OSError, ValueError, KeyError, TypeError):
        return "python3"


def _route_access_log(app_log: logging.Logger) -> None:
    """Send our access log lines through Voila's log handler (same format, same stream)."""
    access_log.propagate = False
    access_log.setLevel(logging.INFO)
    for h in app_log.handlers:
        access_log.addHandler(h)


main = ContrastAidVoila.launch_instance
