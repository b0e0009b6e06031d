from plumbrule.cli.main import run

run()
