"""A tiny announcement mechanism so that views can follow a Qt-free model.

The core never imports Qt; a window subscribes to an :class:`Event` and
updates itself when the model announces a change.
"""

from __future__ import annotations


class Event:
    """A named announcement that callbacks can subscribe to.

    Examples
    --------
    >>> changed = Event("changed")
    >>> seen = []
    >>> changed.connect(seen.append)
    >>> changed.emit("roles")
    >>> seen
    ['roles']
    """

    def __init__(self, name: str):
        self.name = name
        self._callbacks: list = []

    def connect(self, callback) -> None:
        if callback not in self._callbacks:
            self._callbacks.append(callback)

    def disconnect(self, callback) -> None:
        if callback in self._callbacks:
            self._callbacks.remove(callback)

    def emit(self, *args, **kwargs) -> None:
        for callback in list(self._callbacks):
            callback(*args, **kwargs)
