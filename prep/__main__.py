from prep.cli import main

main()
