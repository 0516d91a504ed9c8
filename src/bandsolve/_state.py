"""Fitted state of an estimator as named fields, the form a model file stores.

Each estimator lists its fitted state in ``STATE_FIELDS``: a stable field name (what the model
file calls it) mapped to the attribute that holds it. Renaming an attribute then changes one
line of that mapping, never the files already written. Nothing outside the estimator reads
the attributes themselves.
"""

from __future__ import annotations

from typing import Any, ClassVar

from bandsolve.errors import ModelFileError

__all__ = ["RecordedState"]


class RecordedState:
    """Mixin for estimators whose fitted state a model file stores by name."""

    #: Field name in the model file → attribute of the fitted estimator.
    STATE_FIELDS: ClassVar[dict[str, str]] = {}
    #: Field name → attribute name in 0.1.0, whose files (schema 1) stored ``vars()``. Empty
    #: means "as in STATE_FIELDS"; when you rename an attribute, write the old mapping here
    #: (the test that loads the kept 0.1.0 model files fails until you do).
    SCHEMA1_ATTRIBUTES: ClassVar[dict[str, str]] = {}
    #: Field name → value for fields that files written before the field existed lack.
    OPTIONAL_STATE: ClassVar[dict[str, Any]] = {}

    def state_record(self) -> dict[str, Any]:
        """The fitted state as ``{field name: value}`` (arrays, numbers, strings, None)."""
        missing = [a for a in self.STATE_FIELDS.values() if not hasattr(self, a)]
        if missing:
            raise ModelFileError(f"{type(self).__name__} is not fitted (no {missing[0]}); "
                                 "fit it before saving")
        return {name: getattr(self, attr) for name, attr in self.STATE_FIELDS.items()}

    @classmethod
    def from_state_record(cls, params: dict[str, Any], record: dict[str, Any]) -> Any:
        """A fitted estimator from its parameters and :meth:`state_record` output."""
        record = {**cls.OPTIONAL_STATE, **record}
        missing = sorted(set(cls.STATE_FIELDS) - set(record))
        unknown = sorted(set(record) - set(cls.STATE_FIELDS))
        if missing or unknown:
            raise ModelFileError(
                f"{cls.__name__} state in the model file "
                + (f"lacks {', '.join(missing)}" if missing else f"has unknown {unknown[0]}")
                + "; the file is damaged or from a different bandsolve, rebuild the model")
        est = cls(**params)
        for name, attr in cls.STATE_FIELDS.items():
            setattr(est, attr, record[name])
        return est

    @classmethod
    def from_attributes(cls, params: dict[str, Any], attributes: dict[str, Any]) -> Any:
        """A fitted estimator from a stored attribute dictionary (model schema 1, 0.1.0).

        Schema 1 stored ``vars(estimator)``; its names are translated to field names here,
        so old files keep loading whatever the attributes are called later.
        """
        names = cls.SCHEMA1_ATTRIBUTES or cls.STATE_FIELDS
        renamed = {name: attributes[attr] for name, attr in names.items() if attr in attributes}
        return cls.from_state_record(params, renamed)
