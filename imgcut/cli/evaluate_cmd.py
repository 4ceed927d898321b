"""Command module placeholder: its owner registers commands on `imgcut.cli._app.app`."""
