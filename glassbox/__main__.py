from glassbox.cli import main

main()
