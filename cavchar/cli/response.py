"""Options of a stated (calibrated) probe response, shared by ``cavchar plan probes`` and
``cavchar simulate probes``."""

from __future__ import annotations

import argparse
import math

from cavchar.cli.common import quantity, real

__all__ = ["add_response_options", "response_from_args"]


def add_response_options(parser: argparse.ArgumentParser | argparse._ArgumentGroup) -> None:
    """Options of a stated (calibrated) probe response, for planning and simulation.

    A Ramsey fringe ``P(1 | n) = e0 + (1 - e0 - e1) (1 + V cos(phi0 n + phi_r)) / 2``
    (:class:`cavchar.models.probes.response.FringeResponse`) from ``--visibility``,
    ``--phase-per-photon``, ``--phase-offset``, ``--readout-error-0`` and
    ``--readout-error-1`` (defaults: an ideal parity probe), or a calibrated
    ``--response-table`` instead; read back by :func:`response_from_args`.
    """
    parser.add_argument("--visibility", type=real(0.0, 1.0), default=1.0,
                        help="fringe visibility V in [0, 1]")
    parser.add_argument("--phase-per-photon", type=quantity("phase", minimum=None),
                        default=math.pi,
                        help="fringe phase per photon phi0 (rad, or e.g. 180deg = parity probe)")
    parser.add_argument("--phase-offset", type=quantity("phase", minimum=None), default=0.0,
                        help="fringe phase offset phi_r (rad or deg)")
    parser.add_argument("--readout-error-0", type=real(0.0, 1.0), default=0.0,
                        help="readout error e0 = P(read 1 | ideal 0)")
    parser.add_argument("--readout-error-1", type=real(0.0, 1.0), default=0.0,
                        help="readout error e1 = P(read 0 | ideal 1)")
    parser.add_argument("--response-table", default=None, metavar="FILE",
                        help="calibrated table with columns photons, p_one[, setting] instead "
                        "of the fringe")


def response_from_args(args: argparse.Namespace):
    """The probe response of :func:`add_response_options`: a ``TableResponse`` read from
    ``--response-table``, else the ``FringeResponse`` of the fringe options."""
    from cavchar.models.probes.response import FringeResponse, TableResponse

    if args.response_table:
        return TableResponse.from_file(args.response_table)
    return FringeResponse(visibility=args.visibility, phase_per_photon=args.phase_per_photon,
                          phase_offset=args.phase_offset, readout_error_0=args.readout_error_0,
                          readout_error_1=args.readout_error_1)
