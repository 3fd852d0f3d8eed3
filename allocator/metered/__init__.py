"""Metered per-feeder net load: read a file, stream it into the study intervals, merge it into
the study year.

Input file (CSV, ``.csv.gz`` or Parquet) in one of two layouts, told apart by the header:

* **long**, one reading per row::

      timestamp,feeder_id,mw
      2025-01-01T00:00:00+01:00,F01,3.42
      2025-01-01T00:00:00+01:00,TOTAL,51.7

* **wide**, as historians export it: a ``timestamp`` column and one column per feeder,
  headed by its feeder_id (and ``TOTAL``); a blank cell is no reading::

      timestamp,F01,F02,TOTAL
      2025-01-01T00:00:00+01:00,3.42,1.10,51.7

  A header with a ``timestamp`` column, neither ``feeder_id`` nor ``mw``, and at least one
  column named after a feeder of the study (or TOTAL) is wide; any other header is long.

* ``mw`` is net MW for the interval *starting* at ``timestamp`` (export negative).
* ``feeder_id`` is a feeder of the study, or ``TOTAL`` for the system demand series used when
  ``demand_basis`` is ``metered_total``.
* ``timestamp`` is ISO 8601 with a UTC offset (``+02:00``, ``+0200`` or ``Z``), or local
  wall-clock time in the study time zone without an offset; a file uses one form throughout.
  Local times in the hour skipped in spring do not exist and are an error; in the repeated
  autumn hour the first reading of a feeder at a given local time is summer time, the second
  standard time (wide files: the first row, the second row).

Alignment to the study intervals, per series (its resolution is the median spacing of its
readings, see :mod:`.spacing`): finer readings are averaged into the interval their start
falls in; equal or coarser ones must start on an interval boundary and are held over the
intervals they cover (see :mod:`.align`).  Readings whose intervals lie entirely outside the
study year are ignored (with a note).

Out-of-range rule (a plausibility rule of this tool, not taken from a standard): a reading is
out of range when ``mw > 1.5 × peak_mw + 0.1`` or ``mw < −(1.5 × pv_mw + 0.1)``: a feeder's net
load should not exceed its peak gross load by half, nor its export its installed PV by half;
the 0.1 MW margin keeps very small feeders from being flagged for meter noise.

How it is read (see the modules): :mod:`.sources` streams Arrow record batches with file
line numbers; :mod:`.long` / :mod:`.wide` decode a batch (feeder ids by dictionary, times by
distinct text, :mod:`.columns`, :mod:`.timestamps`) and check its rows (:mod:`.rowchecks`);
:mod:`.sequence` checks order and duplicates per series; :mod:`.accumulate` scatters the
readings into the ``[series, interval]`` arrays; :mod:`.align` and :mod:`.quality` finish
them; :mod:`.merge` fills the gaps into the study year; :mod:`.years` turns data over several
calendar years (one file or several) into one result per year.  Memory: the arrays (10 bytes per
series and interval while reading, 8 after) plus a fixed batch size, whatever the file size.
"""

from .merge import interpolate_rows, merge_metered
from .model import TOTAL_ID, MeteredData
from .reader import read_metered

__all__ = ["MeteredData", "read_metered", "merge_metered", "interpolate_rows", "TOTAL_ID"]
