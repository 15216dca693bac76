import pytest

from sahaboltz.data.paths import shared_data_dir


@pytest.fixture(scope="session")
def source_dir():
    """The raw source data (../shared/data); tests that need it skip when it is absent."""
    path = shared_data_dir()
    if path is None:
        pytest.skip("raw source data (../shared/data next to the checkout) not present: "
                    "the importer re-run checks need it")
    return path


@pytest.fixture(scope="session")
def db():
    from sahaboltz.data.database import default_database
    return default_database()
