"""Touchstone reader: Version 1.0 (.sNp) and Version 2.0 text to frequency-first network matrices.

Source: Touchstone(R) File Format Specification Version 2.0, IBIS Open Forum, ratified 24 April 2009
(below "TS2"). The rules this module relies on, by TS2 section:

- "Option Line": ``# <frequency unit> <parameter> <format> R <n>``; defaults GHz, S, MA, R 50;
  units Hz, kHz, MHz, GHz; formats RI (real, imaginary), MA (magnitude, angle),
  DB (20*log10|N|, angle); angles in degrees; case-insensitive. H and G parameters exist in the
  format but are refused here.
- "Option Line", normalisation. Version 1.0: network data are normalised to the reference
  resistance R (TS2 Example 9: "Z11 is normalized to 75 ohms, as given by the reference impedance
  (R 75)"), so Z = z*R; for admittance the normalised value is y = Y/(1/R) (common practice), so
  Y = y/R. Version 2.0 (TS2 page 7, "Option Line"): "Network data for G-, H-, Y- and Z-parameters
  in Version 2.0 files is not normalized. Therefore, the reference resistance and [Reference]
  keyword have no impact on G-, H-, Y-, or Z-parameter data in Version 2.0 files." So Version 2.0
  Y and Z are taken as siemens and ohms. Where this was read: the specification PDF itself was not
  in the searchable store; the sentence is quoted verbatim from it in a public users' mailing-list
  post, and the IBIS Open Forum's draft announcement says the same
  ("normalization is removed for G-, H-, Y- and Z-parameters").
- "[Network Data]", 1-port and 2-port networks: Version 1.0 two-port order is N11 N21 N12 N22;
  "[Two-Port Data Order]" 21_12 keeps that order, 12_21 is N11 N12 N21 N22 (read from a parser
  summary of TS2 and matching scikit-rf 2.2's reader; not checked against the PDF itself).
- "3-port and 4-port Networks", "5-port and Above": matrix rows in order, at most four pairs per
  line in Version 1.0, each row starting a new line.
- "[Matrix Format]": Lower / Upper give the triangle including the diagonal, row by row; the other
  half follows from symmetry.
- "[Noise Data]" / Version 1.0 noise block: a frequency not larger than the previous one starts the
  two-port noise block. Noise parameters are read past and dropped.

Modules: ``reader`` (entry point), ``text`` (comments, lines, regions), ``numbers`` (the
vectorised number scanner), ``rounding`` (its correctly rounded values, exactly as ``float``),
``scratch`` (reused buffers), ``options`` (option line), ``version1``, ``version2`` (keywords),
``records`` (record counts and matrix assembly).
"""

from __future__ import annotations

from workers.engine.touchstone.options import MAX_PORTS, DataFormat, Parameter
from workers.engine.touchstone.reader import parse_touchstone
from workers.engine.touchstone.records import (
    MAX_FREQUENCIES,
    MatrixFormat,
    TouchstoneData,
    TouchstoneNote,
)
from workers.engine.touchstone.text import Version, decode_text

__all__ = [
    "MAX_FREQUENCIES", "MAX_PORTS", "DataFormat", "MatrixFormat", "Parameter", "TouchstoneData",
    "TouchstoneNote", "Version", "decode_text", "parse_touchstone",
]
