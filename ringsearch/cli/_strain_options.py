"""Options for reading strain files, shared by every command that reads strain.

``condition``, ``search``, ``inject`` and ``analyse`` all read strain through
:mod:`ringsearch.data.io`; this module gives them the same three options for
files that do not say everything about themselves, and turns the parsed
values into keyword arguments of the readers and pipelines:

* ``--sample-rate HZ`` and ``--data-start GPS``: needed for one-column text
  files (strain only).  ``--gps-start`` is the same option where the command
  does not already use that name (``search`` does: there it is the start of
  the searched window).
* ``--detector NAME``: needed for files whose name does not follow the GWOSC
  pattern (e.g. ``strain.txt``) and that record no detector; it overrides the
  name any file records, so it only applies when all files are of one detector.
"""

from __future__ import annotations

import argparse
from typing import Any


def add_strain_input_options(parser: argparse.ArgumentParser,
                             start_flags: tuple[str, ...] = ("--gps-start", "--data-start")
                             ) -> argparse._ArgumentGroup:
    """Add ``--sample-rate``, the data-start option and ``--detector`` to ``parser``.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        A subcommand's parser.
    start_flags : tuple of str
        Spellings of the option giving the GPS time of the first sample of
        one-column text files.  ``--data-start`` must be among them (error
        messages of the readers name it); a command that already uses
        ``--gps-start`` for something else passes ``("--data-start",)``.

    Returns
    -------
    argparse._ArgumentGroup
        The "reading strain files" group the options were put in.

    Examples
    --------
    >>> p = argparse.ArgumentParser()
    >>> _ = add_strain_input_options(p)
    >>> args = p.parse_args(["--sample-rate", "4096", "--gps-start", "1e9", "--detector", "H1"])
    >>> strain_read_kwargs(args)
    {'detector': 'H1', 'sample_rate': 4096.0, 'gps_start': 1000000000.0}
    """
    if "--data-start" not in start_flags:
        raise ValueError("start_flags must include '--data-start'.")
    g = parser.add_argument_group(
        "reading strain files",
        "GWOSC HDF5 and GWF files describe themselves; these are needed only for files "
        "that do not.")
    g.add_argument("--sample-rate", type=float, default=None, metavar="HZ",
                   help="sample rate of one-column text files (strain only), in Hz; "
                        "needed together with --data-start")
    g.add_argument(*start_flags, dest="data_start", type=float, default=None, metavar="GPS",
                   help="GPS time in s of the first sample of one-column text files; needed "
                        "together with --sample-rate")
    g.add_argument("--detector", default=None, metavar="NAME",
                   help="detector (e.g. H1) of files that do not record one, such as text "
                        "files not named like GWOSC files (H-H1_...); it overrides the name "
                        "a file records, so give it only when all files are of one detector")
    return g


def strain_read_kwargs(args: argparse.Namespace) -> dict[str, Any]:
    """Keyword arguments of :func:`ringsearch.data.io.read_strain` from parsed options.

    Returns ``{"detector", "sample_rate", "gps_start"}`` (values None when
    the option was not given).  The pipelines, whose ``gps_start`` may mean a
    search window, take the same values as ``detector``, ``sample_rate`` and
    ``data_start``: see :func:`pipeline_read_kwargs`.

    Examples
    --------
    >>> strain_read_kwargs(argparse.Namespace(detector=None, sample_rate=None, data_start=None))
    {'detector': None, 'sample_rate': None, 'gps_start': None}
    """
    return {"detector": args.detector, "sample_rate": args.sample_rate,
            "gps_start": args.data_start}


def pipeline_read_kwargs(args: argparse.Namespace) -> dict[str, Any]:
    """Keyword arguments ``detector``, ``sample_rate``, ``data_start`` for the pipelines.

    For :func:`ringsearch.search.pipeline.run_search` and
    :func:`ringsearch.analysis.pipeline.analyse_candidate`.

    Examples
    --------
    >>> ns = argparse.Namespace(detector="L1", sample_rate=2048.0, data_start=1e9)
    >>> pipeline_read_kwargs(ns)
    {'detector': 'L1', 'sample_rate': 2048.0, 'data_start': 1000000000.0}
    """
    return {"detector": args.detector, "sample_rate": args.sample_rate,
            "data_start": args.data_start}
