"""The thin command line over the pure API (entry point: ``edgetally.cli.main.main``)."""
