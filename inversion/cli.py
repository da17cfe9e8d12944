"""The ``sondage`` command line."""


def main(argv=None):  # pragma: no cover - replaced as the commands land
    raise SystemExit("sondage: no commands yet")
