from tinyconv.cli import run

run()
