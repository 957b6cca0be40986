"""Python client of the Stifflane stiff-ODE job service.

    from stifflane_client import Client
    c = Client("http://127.0.0.1:8750")          # key: key=... or $STIFFLANE_KEY
    job = c.submit("examples/jobs/tarnwhistle_demo.json")
    job.wait(progress=True)
    res = job.result()                            # res.t, res.y, res["T"], res.to_dataframe()
    est = c.calibrate("examples/calibrations/tarnwhistle_isomerisation.json")  # a dict
    calibration_tables(est)["parameters"]         # DataFrames when pandas is importable
"""
from stifflane_client.batches import Batch, BatchTable
from stifflane_client.calibrations import tables as calibration_tables
from stifflane_client.client import Client, Job
from stifflane_client.errors import (ApiError, AuthError, CalibrationFailed, InvalidSpec, JobFailed,
                                     ServiceUnavailable, StifflaneError, WaitTimeout, ending)
from stifflane_client.results import CAUTION, Result
from stifflane_client.spec import Model, job_spec, load_spec

__all__ = ["Client", "Job", "Result", "Batch", "BatchTable", "Model", "job_spec", "load_spec", "ApiError", "AuthError",
           "InvalidSpec", "JobFailed", "CalibrationFailed", "ServiceUnavailable", "StifflaneError", "WaitTimeout",
           "CAUTION", "ending", "calibration_tables"]
__version__ = "0.1.0"
