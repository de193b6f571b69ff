"""``python -m sourcelab``: the same command line as the ``sourcelab`` script."""

from sourcelab.cli.main import run

if __name__ == "__main__":
    run()
