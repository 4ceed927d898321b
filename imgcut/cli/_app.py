"""The typer application object shared by every command module."""

import typer

from imgcut.cli._options import OneLineGroup

app = typer.Typer(
    name="imgcut",
    help="Segment images by normalized cuts; export label images, overlays and scores.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    cls=OneLineGroup,
)
