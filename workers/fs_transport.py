"""kombu's filesystem transport with atomic message files (the embedded default's broker).

kombu writes a message straight into its final ``*.msg`` name; a consumer polling every few
milliseconds can take the file while it is still empty and the worker dies on the JSON error.
Here the message is written under a temporary name the consumer ignores, then renamed into
place (atomic within one folder), so a reader only ever sees whole messages.

The transport also declares itself asynchronous: the worker then runs Celery's event loop and
prefork's asynchronous pool, in which every pool child has pipes of its own. kombu's plain
folder transport gets the blocking pool instead, whose children share one queue lock: a child
killed while holding it (``kill -9``, the OOM killer) left every replacement child waiting on that
lock forever, and the worker computed nothing until a restart. The event loop polls the folder
on a timer (:meth:`Transport.register_with_event_loop`) instead of sleeping in ``drain_events``.
"""

from __future__ import annotations

import os
import uuid
from queue import Empty
from time import monotonic

from kombu.exceptions import ChannelError
from kombu.transport import filesystem
from kombu.utils.encoding import str_to_bytes
from kombu.utils.json import dumps


class Channel(filesystem.Channel):
    """A filesystem channel whose ``_put`` is write-then-rename."""

    def _put(self, queue, payload, **kwargs):
        name = f"{int(round(monotonic() * 1000))}_{uuid.uuid4()}.{queue}.msg"
        final = os.path.join(self.data_folder_out, name)
        partial = os.path.join(self.data_folder_out, f".partial-{uuid.uuid4().hex}")
        try:
            with open(partial, "wb") as f:
                f.write(str_to_bytes(dumps(payload)))
            os.replace(partial, final)
        except OSError as exc:
            raise ChannelError(f"Cannot add file {final!r} to directory") from exc


# At most this many messages are handed over per timer tick; the prefetch limit (QoS) stops a
# tick much sooner in practice, this only bounds one tick if that limit is off.
MAX_PER_TICK = 100


class Transport(filesystem.Transport):
    """The filesystem transport using :class:`Channel`, polled from the worker's event loop."""

    Channel = Channel
    implements = filesystem.Transport.implements.extend(asynchronous=True)

    def register_with_event_loop(self, connection, loop):
        """Look at the folders every ``polling_interval`` seconds from the event loop's timer."""
        loop.call_repeatedly(self.polling_interval, self._deliver_ready)

    def _deliver_ready(self) -> None:
        """Deliver the messages waiting now, without sleeping (the event loop must not block)."""
        get = self.cycle.get
        for _ in range(MAX_PER_TICK):
            try:
                get(self._deliver, timeout=0)
            except Empty:
                return
