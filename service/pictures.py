"""Spectrum pictures of stored plans: drawn once, in worker processes, kept in bounded memory.

* **Kept.**  A stored plan never changes, so its picture in one format is drawn once and kept,
  with its ETag, in a least-recently-used cache bounded in bytes
  (:class:`cachetools.LRUCache` sized by each picture's length; ``BANDWRIGHT_PICTURE_CACHE_BYTES``).
* **Drawn apart.**  Drawing is CPU work in matplotlib under one lock (:mod:`service.render`); it
  runs in a :class:`pebble.ProcessPool` of ``BANDWRIGHT_PICTURE_WORKERS`` processes, so it holds
  neither the API process's GIL nor its lock.  Workers fork from a ``forkserver`` that imports
  matplotlib and the solver once (:data:`PRELOAD`), so a replaced worker starts in milliseconds.
* **Bounded.**  At most ``picture_workers + picture_queue`` drawings are in progress or waiting
  for a worker; one more is refused with :class:`~service.errors.PicturesBusyError` (503 with
  Retry-After).
* **Shared.**  Clients asking for a picture that is being drawn wait for that drawing.
* **Stopped.**  When the last client waiting for a drawing leaves, the drawing is cancelled:
  pebble terminates the worker process running it (and starts a fresh one), so the CPU work
  stops at once rather than at a check point.  A drawing that outlasts
  ``BANDWRIGHT_PICTURE_TIMEOUT_S`` is stopped the same way.

Every method runs on the event loop (no locks).
"""

from __future__ import annotations

import asyncio
import logging
import multiprocessing
from collections.abc import Callable
from concurrent.futures import Future
from dataclasses import dataclass, field
from typing import Literal, NamedTuple

import pebble
from cachetools import LRUCache

from service.errors import PicturesBusyError
from service.metrics import Metrics
from service.settings import Settings

__all__ = ["PRELOAD", "DrawFunction", "Picture", "PictureKey", "Pictures", "draw_picture"]

logger = logging.getLogger(__name__)

ImageFormat = Literal["svg", "png"]
PictureKey = tuple[str, ImageFormat]
"""A plan id and a format."""
DrawFunction = Callable[[str, str, ImageFormat, str | None], bytes]
"""(plan JSON, its request JSON, format, its parent plan's JSON or None) → image bytes; runs in
a worker process, so it must be picklable (a module-level function, or a
:func:`functools.partial` of one)."""
PRELOAD = ["service.render"]
"""Modules the forkserver imports once for every worker it forks."""
SHUTDOWN_WAIT_S = 5.0


def draw_picture(
    plan_json: str, request_json: str, fmt: ImageFormat, parent_json: str | None = None
) -> bytes:
    """Draw a stored plan's spectrum picture (in a worker process); with its parent plan, the
    picture marks what changed since it."""
    from service.convert import plan_from_wire, to_problem
    from service.render import render_spectrum
    from service.schemas import PlanOut, PlanRequest

    plan = plan_from_wire(PlanOut.model_validate_json(plan_json))
    problem = to_problem(PlanRequest.model_validate_json(request_json))
    parent = (
        None if parent_json is None else plan_from_wire(PlanOut.model_validate_json(parent_json))
    )
    return render_spectrum(plan, problem, fmt, parent=parent)


class Picture(NamedTuple):
    """A drawn picture and its strong ETag."""

    tag: str
    content: bytes


def _picture_size(picture: Picture) -> int:
    return len(picture.content) + len(picture.tag)


@dataclass
class _Drawing:
    """One drawing in progress and how many clients wait for it."""

    future: Future[bytes]
    """pebble's future: cancelling it while it runs ends the worker process."""
    result: asyncio.Future[bytes]
    tag: str
    waiters: int = field(default=0)


class Pictures:
    """Drawn pictures, the drawings in progress and the worker processes (one per application)."""

    def __init__(self, settings: Settings, metrics: Metrics, draw: DrawFunction) -> None:
        self._draw = draw
        self._metrics = metrics
        self._workers = settings.picture_workers
        self._capacity = settings.picture_workers + settings.picture_queue
        self._timeout_s = settings.picture_timeout_s
        self._retry_after_s = settings.retry_after_s
        self._kept: LRUCache[PictureKey, Picture] = LRUCache(
            maxsize=settings.picture_cache_bytes, getsizeof=_picture_size
        )
        self._drawing: dict[PictureKey, _Drawing] = {}
        self._pool: pebble.ProcessPool | None = None

    @property
    def drawing(self) -> int:
        """Drawings in progress or waiting for a worker now."""
        return len(self._drawing)

    @property
    def waiting(self) -> int:
        """Clients waiting for a drawing now."""
        return sum(drawing.waiters for drawing in self._drawing.values())

    def kept(self, key: PictureKey) -> Picture | None:
        """The picture drawn before for ``key``, or None."""
        picture = self._kept.get(key)
        if picture is not None:
            self._metrics.picture_hits.inc()
        return picture

    async def draw(
        self,
        key: PictureKey,
        tag: str,
        plan_json: str,
        request_json: str,
        parent_json: str | None = None,
    ) -> Picture:
        """Draw (or wait for the drawing of) ``key``'s picture and keep it (``parent_json``:
        the plan it replans, whose changes it marks).

        Cancelling the caller leaves the drawing; the last caller to leave stops it.  Raises
        :class:`~service.errors.PicturesBusyError` when no drawing place is free, and whatever
        the drawing raised.
        """
        drawing = self._drawing.get(key)
        if drawing is None:
            if len(self._drawing) >= self._capacity:
                raise PicturesBusyError(self._retry_after_s)
            drawing = self._start(key, tag, (plan_json, request_json, key[1], parent_json))
        drawing.waiters += 1
        try:
            content = await asyncio.shield(drawing.result)
        finally:
            drawing.waiters -= 1
            if drawing.waiters == 0 and not drawing.result.done():
                logger.info("nobody waits for the %s picture of plan %s: stopped", key[1], key[0])
                self._forget(key, drawing)
                drawing.future.cancel()  # pebble ends the worker process that runs it
        return Picture(drawing.tag, content)

    def close(self) -> None:
        """Stop every drawing and the worker processes."""
        for key, drawing in list(self._drawing.items()):
            self._forget(key, drawing)
            drawing.future.cancel()
        if self._pool is not None:
            self._pool.stop()  # type: ignore[no-untyped-call]  # pebble leaves it untyped
            self._pool.join(timeout=SHUTDOWN_WAIT_S)
            self._pool = None

    def _start(
        self, key: PictureKey, tag: str, args: tuple[str, str, ImageFormat, str | None]
    ) -> _Drawing:
        future = self._worker_pool().schedule(self._draw, args=args, timeout=self._timeout_s)
        drawing = _Drawing(future, asyncio.wrap_future(future), tag)
        self._drawing[key] = drawing
        drawing.result.add_done_callback(lambda done: self._finished(key, drawing, done))
        return drawing

    def _finished(self, key: PictureKey, drawing: _Drawing, done: asyncio.Future[bytes]) -> None:
        self._forget(key, drawing)
        if done.cancelled():
            return
        error = done.exception()  # retrieved here too, so an unwaited failure is not reported
        if error is not None:
            logger.warning("the %s picture of plan %s failed: %r", key[1], key[0], error)
            return
        self._metrics.pictures_drawn.labels(key[1]).inc()
        picture = Picture(drawing.tag, done.result())
        try:
            self._kept[key] = picture
        except ValueError:  # larger than the whole cache: served, not kept
            logger.info("the %s picture of plan %s is too large to keep", key[1], key[0])

    def _forget(self, key: PictureKey, drawing: _Drawing) -> None:
        if self._drawing.get(key) is drawing:
            del self._drawing[key]

    def _worker_pool(self) -> pebble.ProcessPool:
        if self._pool is None:
            context = multiprocessing.get_context("forkserver")
            context.set_forkserver_preload(PRELOAD)
            self._pool = pebble.ProcessPool(max_workers=self._workers, context=context)
        return self._pool
