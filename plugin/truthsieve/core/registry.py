"""A small declarative registry: named entries in listed order, and a live view of their names.

The rule classes (:data:`truthsieve.core.rules.RULE_CLASSES`) and the mechanisms
(:data:`truthsieve.core.mechanisms.MECHANISM_REGISTRY`) are each one :class:`Registry`:
every function that used to dispatch on a name asks the registry for the entry instead,
and the configuration validates against the same registry. The public name tuples
(``MECHANISMS``, ``DICTATORS``, ``RULE_CLASS_KINDS``) are :class:`Names` views, so an entry
added with :meth:`Registry.register` (a plugin, a test) shows up in them at once.

>>> from dataclasses import dataclass
>>> @dataclass(frozen=True)
... class Entry:
...     name: str
>>> shapes = Registry("shape", [Entry("circle"), Entry("square")])
>>> names = shapes.names()
>>> shapes.register(Entry("hexagon"))
>>> list(names), "hexagon" in names
(['circle', 'square', 'hexagon'], True)
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator, Sequence
from typing import Generic, Protocol, TypeVar, overload


class _Named(Protocol):
    @property
    def name(self) -> str: ...


EntryT = TypeVar("EntryT", bound=_Named)


class Registry(Generic[EntryT]):
    """Entries keyed by ``entry.name``, in registration order; ``what`` names them in errors."""

    def __init__(self, what: str, entries: Iterable[EntryT] = ()) -> None:
        self.what = what
        self._entries: dict[str, EntryT] = {}
        for entry in entries:
            self.register(entry)

    def register(self, entry: EntryT) -> None:
        """Add ``entry`` at the end; a name given twice is an error."""
        if entry.name in self._entries:
            raise ValueError(f"{self.what} {entry.name!r} is registered already")
        self._entries[entry.name] = entry

    def unregister(self, name: str) -> EntryT:
        """Remove and return the entry ``name`` (a test's or a plugin's clean-up)."""
        return self._entries.pop(name)

    def get(self, name: str) -> EntryT | None:
        return self._entries.get(name)

    def require(self, name: str, error: type[Exception]) -> EntryT:
        """The entry ``name``; ``error`` with the one-line :meth:`unknown` message when none is registered."""
        entry = self._entries.get(name)
        if entry is None:
            raise error(self.unknown(name))
        return entry

    def unknown(self, name: object) -> str:
        """The one-line message for a name that is not registered, listing those that are."""
        return f"unknown {self.what} {name!r}; expected one of {', '.join(self._entries)}"

    def __contains__(self, name: object) -> bool:
        return name in self._entries

    def __iter__(self) -> Iterator[EntryT]:
        return iter(list(self._entries.values()))

    def __len__(self) -> int:
        return len(self._entries)

    def names(self, where: Callable[[EntryT], bool] | None = None) -> Names:
        """A live view of the names of the entries (for which ``where`` holds), in order."""
        return Names(lambda: tuple(e.name for e in self._entries.values() if where is None or where(e)))


class Names(Sequence[str]):
    """A read-only tuple of names recomputed from its registry on every use."""

    __slots__ = ("_read",)

    def __init__(self, read: Callable[[], tuple[str, ...]]) -> None:
        self._read = read

    @overload
    def __getitem__(self, index: int) -> str: ...
    @overload
    def __getitem__(self, index: slice) -> tuple[str, ...]: ...
    def __getitem__(self, index: int | slice) -> str | tuple[str, ...]:
        return self._read()[index]

    def __len__(self) -> int:
        return len(self._read())

    def __iter__(self) -> Iterator[str]:
        return iter(self._read())

    def __contains__(self, name: object) -> bool:
        return name in self._read()

    def __eq__(self, other: object) -> bool:
        if isinstance(other, (Names, tuple, list)):
            return self._read() == tuple(other)
        return NotImplemented

    def __add__(self, other: Sequence[str]) -> tuple[str, ...]:
        return self._read() + tuple(other)

    def __repr__(self) -> str:
        return repr(self._read())
