from tubeyield.cli import run

run()
