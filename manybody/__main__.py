import sys

from manybody.cli.parser import main

sys.exit(main())
