"""The project's exception hierarchy: one base error, one subclass per kind of problem."""

from __future__ import annotations


class TruthsieveError(Exception):
    """Base class of every error truthsieve raises on purpose."""


class InputError(TruthsieveError):
    """The labels, items or configuration cannot be used as given."""


class NoSourcesError(InputError):
    """A batch has no sources left to screen."""


class NoItemsError(InputError):
    """A batch has no items, or a source labelled no item of positive weight."""


class WeightError(InputError):
    """A source or item weight is zero, negative or not finite where that is not allowed."""


class UnknownReferenceError(InputError):
    """A label names an item or source that is not in the items table or the registry."""


class RuleClassError(InputError):
    """The rule class cannot be built: no usable feature, no listed rule, unknown kind."""


class MechanismError(InputError):
    """The mechanism does not exist or does not apply to the rule class."""


class ConfigError(InputError):
    """The configuration file is missing, unreadable or invalid."""


class BatchLockedError(TruthsieveError):
    """Another run holds the lock of this batch date."""


class LedgerBrokenError(InputError):
    """The out folder's ledger fails its hash chain; the message names the first broken line."""


class VerdictError(InputError):
    """A verdict or revocation names a night that does not exist or is not in the state it needs."""


class ClassIndexError(InputError):
    """A label or a listed rule holds a value that is not a class index 0..K-1."""
