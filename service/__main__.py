import sys

from service.commands import main

sys.exit(main())
