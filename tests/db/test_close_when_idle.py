"""Closing a run's connection while a database thread still runs a statement on one of its cursors.

After an interruption a writer thread can still be finishing a transaction; DuckDB then refuses to
close the connection ("connection is busy"). `close_when_idle` waits for the database threads and
closes. The statement here is held open by a Python function inside the query until a timer
releases it, so the connection is busy when the close is asked for, whatever the machine's load.
"""
import threading

import duckdb
import pytest

from ratescape.store.database import DB_THREAD_PREFIX, close_when_idle


def busy_connection(name: str):
    con = duckdb.connect()
    gate, started = threading.Event(), threading.Event()

    def hold(x: int) -> int:
        started.set()
        gate.wait(60)
        return x

    con.create_function("hold", hold)
    cursor = con.cursor()
    result = []
    thread = threading.Thread(target=lambda: result.append(cursor.execute("SELECT hold(7)").fetchone()[0]),
                              name=name)
    thread.start()
    assert started.wait(60)
    return con, gate, thread, result


def test_plain_close_of_a_busy_connection_is_refused():
    con, gate, thread, _ = busy_connection(f"{DB_THREAD_PREFIX}test")
    with pytest.raises(duckdb.Error, match="busy"):
        con.close()
    gate.set()
    thread.join()
    con.close()


def test_close_when_idle_waits_for_the_database_thread():
    con, gate, thread, result = busy_connection(f"{DB_THREAD_PREFIX}test")
    timer = threading.Timer(0.2, gate.set)
    timer.start()
    close_when_idle(con)                      # refused at first, then waits for the thread, then closes
    assert not thread.is_alive() and result == [7]
    with pytest.raises(duckdb.Error):          # closed: no statement runs any more
        con.execute("SELECT 1")
    timer.join()
