from refit.cli import main

main()
