from ballast.cli import main

main()
