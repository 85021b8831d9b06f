from benchkit.cli import main

main()
