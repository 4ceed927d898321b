"""The typer application object shared by every command module."""

import typer

app = typer.Typer(
    name="imgcut",
    help="Segment images by normalized cuts; export label images, overlays and scores.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
