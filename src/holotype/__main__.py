from holotype.cli import main

main()
