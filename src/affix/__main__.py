import sys

from affix.workflow.cli import main

sys.exit(main())
