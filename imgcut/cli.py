"""Command line (placeholder until the CLI lands)."""


def main() -> None:
    print("imgcut")
