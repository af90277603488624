from perfcheck.cli import main

main(prog_name="perfcheck")
