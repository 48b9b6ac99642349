"""The machine block printed at the top of the benchmark scripts (what the figures were
measured on)."""
import os
import platform


def print_machine():
    import cantera as ct
    import numpy as np
    import scipy
    print("machine")
    print(f"  platform      {platform.platform()}")
    print(f"  processor     {platform.processor() or platform.machine()}  "
          f"({os.cpu_count()} logical CPUs)")
    print(f"  python        {platform.python_version()}")
    print(f"  numpy         {np.__version__}")
    print(f"  scipy         {scipy.__version__}")
    print(f"  cantera       {ct.__version__}")
    threads = {k: os.environ[k] for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS",
                                          "MKL_NUM_THREADS") if k in os.environ}
    print(f"  BLAS threads  {threads or 'library default'}")
    print()
