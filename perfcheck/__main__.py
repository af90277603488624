from perfcheck.cli import main

main()
