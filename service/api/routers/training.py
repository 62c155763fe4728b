from __future__ import annotations

from fastapi import APIRouter

from models.errors import AuthError, InputError, NotReady, StoreError
from service import forecasting
from service.api.deps import WorkspaceDep, WriteAccess
from service.api.responses import ERRORS
from service.api.schemas import TrainingOut, TrainingRequest

router = APIRouter(prefix="/v1", tags=["training"])


@router.post(
    "/training",
    response_model=TrainingOut,
    responses=ERRORS(AuthError, NotReady, InputError, StoreError),
    summary="Train (and backtest) a new model version from the store",
    description="Needs the bearer token. The service switches to the new version when it "
    "is complete; forecasts in flight finish on the old one.",
)
def train(body: TrainingRequest, ws: WorkspaceDep, _auth: WriteAccess) -> TrainingOut:
    m = forecasting.train(ws, body.metric, backtest=body.backtest)
    bt = m.report.get("backtest")
    return TrainingOut(
        metric=m.metric,
        model_version=m.version,
        n_train=m.report["n_train"],
        n_calibration=m.report["n_calibration"],
        backtested_coverage=m.backtested_coverage,
        backtest=None
        if bt is None
        else {
            k: bt.get(k)
            for k in ("model", "baselines", "n_test", "coverage_nominal", "candidates", "weights", "note")
        },  # issue 10: candidates, combination, note
    )
