from levgap.cli import main

main()
