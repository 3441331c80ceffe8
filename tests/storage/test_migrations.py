"""Databases are built by the migrations; the migrations must agree with the models."""

from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from alembic.config import Config
from sqlalchemy import inspect

from rundash.storage.engine import migrations_dir, open_database
from rundash.storage.orm import Base


def _head():
    cfg = Config()
    cfg.set_main_option("script_location", str(migrations_dir()))
    return ScriptDirectory.from_config(cfg).get_current_head()


class TestMigrations:
    def test_empty_file_upgrades_to_head(self, db_url):
        db = open_database(db_url, create=True)
        with db.engine.connect() as conn:
            assert MigrationContext.configure(conn).get_current_revision() == _head()
            tables = set(inspect(conn).get_table_names())
        assert set(Base.metadata.tables) <= tables
        db.dispose()

    def test_models_and_migrations_agree(self, db):
        with db.engine.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True})
            diff = compare_metadata(ctx, Base.metadata)
        assert diff == []

    def test_opening_again_keeps_data(self, db_url, machine_file):
        from rundash.ingest.machine_file import load_machine_description
        from rundash.storage import queries as q
        desc, _ = load_machine_description(machine_file)
        db = open_database(db_url, create=True)
        with db.write() as conn:
            q.upsert_machine(conn, desc)
        db.dispose()
        db = open_database(db_url, create=True)
        with db.read() as conn:
            assert [m.spec.name for m in q.list_machines(conn)] == ["Test rig T-1"]
        db.dispose()

    def test_every_revision_file_is_named_rev_slug(self):
        names = [p.name for p in (migrations_dir() / "versions").glob("*.py")
                 if p.name != "__init__.py"]
        assert names and all(n[:4].isdigit() and n[4] == "_" for n in names)
