"""``powderspin nuclide``: the NMR data of a nucleus at a field, or the whole table."""

from __future__ import annotations

from .common import CliError

__all__ = ["add_parser", "run"]


def add_parser(sub) -> None:
    """Add the ``nuclide`` command to the subparsers ``sub``."""
    n = sub.add_parser("nuclide", help="print the NMR data of a nucleus, or list them all")
    n.add_argument("name", nargs="?", help="nucleus, e.g. 27Al")
    n.add_argument("--field", type=float, help="magnetic field in tesla (required with a nucleus)")
    n.add_argument("--list", action="store_true",
                   help="list every nucleus in the table (frequencies at --field, default 1 T)")
    n.set_defaults(func=run)



def run(args) -> int:
    from ..physics import nuclides as nuc_mod

    if args.list:
        field = 1.0 if args.field is None else args.field
        if args.field is not None:
            from ..model.values import check_number

            check_number("nuclide", "field_tesla", args.field, "measurement")
        print(nuc_mod.nuclide_table(field))
        return 0
    if args.name is None:
        raise CliError("nuclide: give a nucleus (e.g. 27Al) or --list")
    nucleus = nuc_mod.get_nuclide(args.name)
    if args.field is None:
        raise CliError("nuclide: --field is required (the magnetic field in tesla, e.g. --field 14.1)")
    from ..model.values import check_number

    check_number("nuclide", "field_tesla", args.field, "measurement")
    print(nuc_mod.nuclide_summary(nucleus, args.field))
    return 0
