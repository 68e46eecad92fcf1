"""The flight record: the flight-file contract (:mod:`.schema`), building records from fits and
predictions (:mod:`.build`), and the one re-fly of a record (:mod:`.refly`)."""

from .build import fit_record, model_from_dict, simulate_record
from .refly import FlightPaths, record_paths, what_if
from .schema import HEADLINE_COLUMNS, REQUIRED_KEYS, SCHEMA, headline_values

__all__ = ["SCHEMA", "REQUIRED_KEYS", "HEADLINE_COLUMNS", "headline_values", "fit_record", "simulate_record",
           "model_from_dict", "FlightPaths", "record_paths", "what_if"]
