from holotype.entry import main

main()
