"""Arms a kill point (tests/runs/kill_points.py) inside the job processes of a sweep on Hydra's
submitit_local launcher, which the test cannot start itself: Python imports ``sitecustomize``
at start-up from this folder when it is on PYTHONPATH.

Only a submitit task process acts (submitit's local controller sets SUBMITIT_LOCAL_GLOBALID for
its tasks alone), and only when DOCHAR_JOB_KILL_POINT names a point; DOCHAR_JOB_KILL_SIGNAL
names the signal (SIGKILL by default; SIGUSR2 is submitit's pre-emption signal) and
DOCHAR_JOB_KILL_ONCE a file whose creation lets only the first process to get there fire.
"""

import os
import signal

if os.environ.get("DOCHAR_JOB_KILL_POINT") and "SUBMITIT_LOCAL_GLOBALID" in os.environ:
    from tests.runs import kill_points

    kill_points.arm(os.environ["DOCHAR_JOB_KILL_POINT"],
                    getattr(signal, os.environ.get("DOCHAR_JOB_KILL_SIGNAL", "SIGKILL")),
                    os.environ.get("DOCHAR_JOB_KILL_ONCE"))
