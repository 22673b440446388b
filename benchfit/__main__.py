from benchfit.cli import main

main()
