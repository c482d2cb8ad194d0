"""A byte bound on what libzmq queues for a SUB socket.

libzmq's receive high-water mark (``ZMQ_RCVHWM``) counts messages, not bytes: with
the default 20,000 and 3.2 MB batches a burst can park gigabytes in the process before
the first one is decoded.  libzmq 4.3 applies a new ``RCVHWM`` to pipes that are
already connected (measured here with pyzmq 27.3 / libzmq 4.3.5: 150 messages of
3.2 MB sent at once queue 481 MB at a mark of 20,000, 67 MB once it was lowered to 20
on the live socket), so a source lowers the mark when it sees large messages::

    hwm = clamp(queue_bytes // largest_message_bytes, HWM_FLOOR, hwm_cap)

Lowering never drops what is queued: libzmq stops reading the connection and the rest
waits in the kernel's socket buffers and the publisher's own queue (back pressure).
The mark is only ever lowered: a raised mark is not seen by a writer libzmq has
already stopped at the old one (it waits for a wake-up that comes every *low-water
mark* messages read, computed from the new, larger mark), so raising it could stall
the stream for good.  A publisher that sends large messages and later small ones
keeps the lower mark until the source is restarted; the kernel buffers and the
publisher's queue still absorb its bursts.
"""

from __future__ import annotations

#: Default bytes libzmq may hold for one socket.
DEFAULT_QUEUE_BYTES: int = 64 * 1024 * 1024
#: The mark never goes below this many messages (a few large messages in flight).
HWM_FLOOR: int = 16


class QueueBudget:
    """The receive high-water mark for a byte budget, from the message sizes seen.

    ``queue_bytes`` 0 switches the byte bound off (the mark stays ``hwm_cap``);
    ``hwm_cap`` 0 means no cap on the count (libzmq's own meaning of 0).
    """

    def __init__(self, queue_bytes: int, hwm_cap: int) -> None:
        self.queue_bytes = int(queue_bytes)
        self.hwm_cap = int(hwm_cap)
        self.hwm = self.hwm_cap
        self.largest = 0  # bytes, the largest message seen

    def mark_for(self, message_bytes: int) -> int:
        """The mark that keeps ``message_bytes``-sized messages within the budget."""
        if self.queue_bytes <= 0:
            return self.hwm_cap
        n = max(HWM_FLOOR, self.queue_bytes // max(1, int(message_bytes)))
        return n if self.hwm_cap <= 0 else min(n, self.hwm_cap)

    def observe(self, largest_bytes: int) -> int | None:
        """Take the largest message of a drain (bytes); return a lower mark to set on
        the socket, or ``None`` to keep the current one."""
        if largest_bytes <= self.largest:
            return None
        self.largest = int(largest_bytes)
        new = self.mark_for(self.largest)
        if self.hwm > 0 and new >= self.hwm:
            return None
        self.hwm = new
        return new
