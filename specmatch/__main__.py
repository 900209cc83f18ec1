from specmatch.cli import console_main

console_main()
