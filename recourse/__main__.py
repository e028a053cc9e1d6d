from recourse.cli import main

main()
