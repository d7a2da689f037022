"""Subcommands of ``spanwright``, one module each (see ``service/cli.py``)."""
