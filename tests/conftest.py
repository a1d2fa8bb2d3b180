import numpy as np
import pytest


@pytest.fixture(scope="session")
def sunspots() -> np.ndarray:
    """Yearly sunspot numbers 1700-2008, shipped inside statsmodels."""
    sm = pytest.importorskip("statsmodels.api")
    return sm.datasets.sunspots.load_pandas().data["SUNACTIVITY"].to_numpy(dtype=float)


@pytest.fixture(scope="session")
def nile() -> np.ndarray:
    """Annual flow of the Nile at Aswan 1871-1970, shipped inside statsmodels."""
    sm = pytest.importorskip("statsmodels.api")
    return sm.datasets.nile.load_pandas().data["volume"].to_numpy(dtype=float)


@pytest.fixture(scope="session")
def elnino() -> np.ndarray:
    """Monthly sea surface temperature (El Nino region) 1950-2010, shipped inside statsmodels, as one series."""
    sm = pytest.importorskip("statsmodels.api")
    return sm.datasets.elnino.load_pandas().data.iloc[:, 1:].to_numpy(dtype=float).ravel()


@pytest.fixture(scope="session")
def sample_warehouse(tmp_path_factory):
    """The invented sample warehouse, built once per run; tests open it read-only."""
    from tsql import sample_db

    return sample_db.build(tmp_path_factory.mktemp("sample") / "warehouse.duckdb")
