"""kombu's filesystem transport with atomic message files (the embedded default's broker).

kombu writes a message straight into its final ``*.msg`` name; a consumer polling every few
milliseconds can take the file while it is still empty and the worker dies on the JSON error.
Here the message is written under a temporary name the consumer ignores, then renamed into
place (atomic within one folder), so a reader only ever sees whole messages.
"""

from __future__ import annotations

import os
import uuid
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


class Transport(filesystem.Transport):
    """The filesystem transport using :class:`Channel`."""

    Channel = Channel
