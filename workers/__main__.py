import sys

from workers.logs import configure_logging
from workers.runner import main, worker_parser
from workers.settings import WorkerSettings

# Logging is set up before main(): its logging.basicConfig then finds a handler and adds none.
settings = WorkerSettings()
known, _ = worker_parser(settings).parse_known_args()
configure_logging(settings.log_format, known.log_level)
sys.exit(main())
