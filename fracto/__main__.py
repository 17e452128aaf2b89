import sys

from fracto.cli import main

sys.exit(main())
