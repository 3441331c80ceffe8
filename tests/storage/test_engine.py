import pytest
from sqlalchemy import text

from rundash.errors import StorageError
from rundash.storage.engine import BUSY_TIMEOUT_MS, open_database, resolve_db


class TestOpenDatabase:
    @pytest.mark.sqlite_only  # SQLite's own pragmas
    def test_every_connection_has_wal_foreign_keys_and_busy_timeout(self, db):
        for _ in range(2):
            with db.engine.connect() as conn:
                assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
                assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
                assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == BUSY_TIMEOUT_MS

    def test_write_transaction_rolls_back_whole(self, db):
        with pytest.raises(RuntimeError):
            with db.write() as conn:
                conn.execute(text("INSERT INTO machine (name, kind, rated_speed_rpm, "
                                  "min_operating_speed_rpm, max_continuous_speed_rpm, profile, "
                                  "rotation, description, tach_column, tach_pulses_per_rev, "
                                  "tach_edge, tach_angle_deg, created_at) VALUES ('m', 'fan', 1, "
                                  "1, 1, 'p', 'cw', '', 't', 1, 'rising', 0, '2026-01-01')"))
                raise RuntimeError("boom")
        with db.read() as conn:
            assert conn.execute(text("SELECT count(*) FROM machine")).scalar() == 0

    def test_missing_folder_is_a_clear_error(self, tmp_path):
        with pytest.raises(StorageError, match="database folder does not exist"):
            open_database(str(tmp_path / "nope" / "x.sqlite"))


class TestResolveDb:
    def test_order_option_then_environment_then_default(self, monkeypatch):
        monkeypatch.setenv("RUNDASH_DB", "/env.sqlite")
        assert resolve_db("opt.sqlite") == "opt.sqlite"
        assert resolve_db(None) == "/env.sqlite"
        monkeypatch.delenv("RUNDASH_DB")
        assert resolve_db(None) == "rundash.sqlite"
