from .io.cli import run

run()
