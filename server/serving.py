"""How the server meets slow clients: deadlines for headers, bodies and idle connections.

A client that opens connections and then sends its request a byte at a time ("slow loris")
would otherwise hold each connection open forever. Three deadlines, all settings:

* ``REMANENCE_HEADER_TIMEOUT_S``: the request line and headers must be complete within this
  time of the connection opening (or of the previous response on a kept-alive connection);
  uvicorn 0.54 has no such deadline, so :class:`TimedH11Protocol` adds one to its h11 protocol.
  The headers may be at most :data:`MAX_HEADER_BYTES` (h11's incomplete-event limit).
* ``REMANENCE_BODY_TIMEOUT_S``: the whole request body must arrive within this time of the
  headers; uvicorn has no body timeout, so :class:`BodyDeadline` (ASGI middleware) answers 408
  and closes the connection when it does not.
* ``REMANENCE_KEEP_ALIVE_S``: an idle kept-alive connection is closed after this (uvicorn's
  ``timeout_keep_alive``).
"""

from __future__ import annotations

import asyncio
from typing import Any

import h11
from uvicorn.protocols.http.h11_impl import H11Protocol

MAX_HEADER_BYTES = 16 * 1024  # request line + headers; h11's default, stated here so it is a decision


class TimedH11Protocol(H11Protocol):
    """uvicorn's h11 protocol with a deadline for the request line and headers.

    The timer is armed when the connection opens and again after every response, and
    cancelled as soon as h11 has read a complete request head (its peer state leaves IDLE).
    """

    header_timeout_s: float = 10.0

    def connection_made(self, transport: asyncio.Transport) -> None:  # type: ignore[override]
        super().connection_made(transport)
        self._header_timer: asyncio.TimerHandle | None = None
        self._arm_header_timer()

    def _arm_header_timer(self) -> None:
        self._cancel_header_timer()
        if self.header_timeout_s > 0:
            self._header_timer = self.loop.call_later(self.header_timeout_s, self._header_timed_out)

    def _cancel_header_timer(self) -> None:
        timer = getattr(self, "_header_timer", None)
        if timer is not None:
            timer.cancel()
            self._header_timer = None

    def _header_timed_out(self) -> None:
        self._header_timer = None
        if self.conn.their_state is h11.IDLE and not self.transport.is_closing():
            self.transport.close()  # headers still incomplete: no answer is owed, the peer is dropped

    def handle_events(self) -> None:
        super().handle_events()
        if self.conn.their_state is not h11.IDLE:
            self._cancel_header_timer()

    def on_response_complete(self) -> None:
        self._arm_header_timer()  # for the next request on this connection; cancelled if one is pipelined
        super().on_response_complete()

    def connection_lost(self, exc: Exception | None) -> None:
        self._cancel_header_timer()
        super().connection_lost(exc)


def protocol_class(header_timeout_s: float) -> type[TimedH11Protocol]:
    """A protocol class bound to one header deadline (uvicorn instantiates it per connection)."""
    return type("BoundTimedH11Protocol", (TimedH11Protocol,), {"header_timeout_s": float(header_timeout_s)})


class BodyDeadline:
    """ASGI middleware: the request body must arrive within ``seconds`` of the headers, else 408.

    On timeout the app's next ``receive()`` sees ``http.disconnect`` (so it stops reading), the
    client gets 408 with ``Connection: close`` (unless a response had started), and whatever the
    app still sends or raises for that request is dropped.
    """

    def __init__(self, app: Any, seconds: float) -> None:
        self.app = app
        self.seconds = float(seconds)

    async def __call__(self, scope: dict, receive: Any, send: Any) -> None:
        if scope["type"] != "http" or self.seconds <= 0:
            await self.app(scope, receive, send)
            return
        loop = asyncio.get_running_loop()
        deadline = loop.time() + self.seconds
        state = {"timed_out": False, "started": False, "body_done": False}

        async def timed_receive() -> dict:
            if state["timed_out"]:
                return {"type": "http.disconnect"}
            if state["body_done"]:
                return await receive()  # after the body only a disconnect can come: no deadline
            try:
                message = await asyncio.wait_for(receive(), timeout=max(0.0, deadline - loop.time()))
            except asyncio.TimeoutError:
                state["timed_out"] = True
                if not state["started"]:
                    state["started"] = True
                    body = f"the request body did not arrive within {self.seconds:g} s".encode()
                    await send({"type": "http.response.start", "status": 408,
                                "headers": [(b"content-type", b"text/plain; charset=utf-8"),
                                            (b"content-length", str(len(body)).encode()),
                                            (b"connection", b"close")]})
                    await send({"type": "http.response.body", "body": body})
                return {"type": "http.disconnect"}
            if message["type"] == "http.request" and not message.get("more_body", False):
                state["body_done"] = True
            return message

        async def guarded_send(message: dict) -> None:
            if state["timed_out"]:
                return  # the 408 was the answer
            if message["type"] == "http.response.start":
                state["started"] = True
            await send(message)

        try:
            await self.app(scope, timed_receive, guarded_send)
        except Exception:
            if not state["timed_out"]:
                raise  # a timed-out request's own failure (it saw a disconnect) is expected


def uvicorn_config(app: Any, settings: Any, **kwargs: Any):
    """The uvicorn configuration every way of serving uses (`remanence serve`, the tests' servers)."""
    import uvicorn

    return uvicorn.Config(
        app,
        http=protocol_class(settings.header_timeout_s),
        timeout_keep_alive=settings.keep_alive_s,
        h11_max_incomplete_event_size=MAX_HEADER_BYTES,
        ws="none",
        **kwargs,
    )
