from howl.cli import main

main()
