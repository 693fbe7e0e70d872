import sys

from workers.runner import main

sys.exit(main())
