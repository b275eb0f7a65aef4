-- blotter: the store's tables in PostgreSQL's dialect.
--
-- schema.sql (SQLite) is the definition of the logical schema: its tables, columns, checks and
-- rules, with the reasons for each. This file states the same tables and columns as they stand
-- at the version its first section names, for a book kept in a PostgreSQL database;
-- tests/store/test_store_postgres.py checks that both define the same tables and columns. A
-- change to the schema is a new section in both files.
--
-- Sections: a new database runs every section, each in one transaction with the version it
-- records in blotter_meta (blotter/store/pg.py). PostgreSQL books start at version 9.
--
-- Differences from the SQLite file, each for a reason of the server:
--   * types: INTEGER is bigint, REAL is double precision, TEXT is text compared byte by byte
--     (COLLATE "C", SQLite's order), so every value copies both ways unchanged;
--   * a row given no id takes one more than the largest (blotter_next_id), as SQLite numbers an
--     INTEGER PRIMARY KEY, so ids are the same whichever backend wrote them;
--   * append-only is enforced twice: triggers refuse UPDATE, DELETE and TRUNCATE of history for
--     every role, and the writer role is granted SELECT and INSERT only (plus UPDATE of a book's
--     description, which SQLite allows too). PostgreSQL has no INSERT OR REPLACE, and
--     INSERT ... ON CONFLICT DO UPDATE is an UPDATE, so SQLite's no-replace triggers have no
--     counterpart here;
--   * one writer at a time: every insert first takes a transaction-level advisory lock held to
--     the commit (BEGIN IMMEDIATE's part in SQLite), so ids and the store's order of history
--     follow commit order;
--   * every commit that writes a table sends NOTIFY blotter_book, so viewers refresh without
--     polling.
--
-- Roles: blotter_writer (the app's role: read and append) and blotter_reader (viewers: read
-- only), both NOLOGIN groups made here when missing; a database administrator grants them to the
-- desk's login roles.

-- @version 9 ------------------------------------------------------------------------------------

DO $$
BEGIN
    IF NOT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = 'blotter_writer') THEN
        CREATE ROLE blotter_writer NOLOGIN;
    END IF;
    IF NOT EXISTS (SELECT 1 FROM pg_roles WHERE rolname = 'blotter_reader') THEN
        CREATE ROLE blotter_reader NOLOGIN;
    END IF;
END $$;

-- What this database is and the schema version it holds (SQLite: application_id, user_version).
CREATE TABLE blotter_meta (
    only_row       bigint PRIMARY KEY CHECK (only_row = 1),
    application_id bigint NOT NULL CHECK (application_id = 1114403954),
    schema_version bigint NOT NULL CHECK (schema_version >= 9)
);

-- The value checks SQLite's date(), time() and datetime() make: text in the store's format
-- that names a real instant, date or time of day.
CREATE FUNCTION blotter_instant_ok(t text) RETURNS boolean
LANGUAGE plpgsql IMMUTABLE AS $$
BEGIN
    IF t !~ '^[0-9]{4}-[0-9]{2}-[0-9]{2}T[0-9]{2}:[0-9]{2}:[0-9]{2}\.[0-9]{6}Z$' THEN
        RETURN false;
    END IF;
    RETURN to_char(substr(t, 1, 19)::timestamp, 'YYYY-MM-DD"T"HH24:MI:SS') = substr(t, 1, 19);
EXCEPTION WHEN others THEN
    RETURN false;
END $$;

CREATE FUNCTION blotter_date_ok(t text) RETURNS boolean
LANGUAGE plpgsql IMMUTABLE AS $$
BEGIN
    RETURN t ~ '^[0-9]{4}-[0-9]{2}-[0-9]{2}$' AND to_char(t::date, 'YYYY-MM-DD') = t;
EXCEPTION WHEN others THEN
    RETURN false;
END $$;

CREATE FUNCTION blotter_hhmm_ok(t text) RETURNS boolean
LANGUAGE plpgsql IMMUTABLE AS $$
BEGIN
    RETURN t ~ '^[0-9]{2}:[0-9]{2}$' AND to_char((t || ':00')::time, 'HH24:MI') = t;
EXCEPTION WHEN others THEN
    RETURN false;
END $$;

CREATE TABLE underlying (
    underlying_id bigint           PRIMARY KEY,
    symbol        text COLLATE "C" NOT NULL UNIQUE CHECK (length(symbol) BETWEEN 1 AND 64),
    description   text COLLATE "C" NOT NULL DEFAULT '',
    kind          text COLLATE "C" NOT NULL CHECK (kind IN ('stock', 'index', 'future', 'fx')),
    currency      text COLLATE "C" NOT NULL CHECK (length(currency) = 3 AND upper(currency) = currency),
    multiplier    double precision NOT NULL CHECK (multiplier > 0),
    american      bigint           NOT NULL CHECK (american IN (0, 1)),
    cash_settled  bigint           NOT NULL CHECK (cash_settled IN (0, 1)),
    div_yield     double precision NOT NULL DEFAULT 0 CHECK (div_yield BETWEEN -1 AND 1),
    beta          double precision NOT NULL DEFAULT 1 CHECK (beta BETWEEN -20 AND 20),
    is_reference  bigint           NOT NULL DEFAULT 0 CHECK (is_reference IN (0, 1)),
    calendar      text COLLATE "C" NOT NULL DEFAULT 'NYSE' CHECK (length(calendar) > 0),
    time_zone     text COLLATE "C" NOT NULL DEFAULT 'America/New_York' CHECK (length(time_zone) > 0),
    cutoff_time   text COLLATE "C" NOT NULL DEFAULT '16:00' CHECK (blotter_hhmm_ok(cutoff_time))
);
CREATE UNIQUE INDEX underlying_one_reference ON underlying (is_reference) WHERE is_reference = 1;

CREATE TABLE contract (
    contract_id   bigint           PRIMARY KEY,
    underlying_id bigint           NOT NULL REFERENCES underlying (underlying_id),
    option_type   text COLLATE "C" NOT NULL CHECK (option_type IN ('C', 'P', 'U')),
    strike        double precision CHECK (strike > 0),
    expiry        text COLLATE "C" CHECK (blotter_date_ok(expiry)),
    cutoff_time   text COLLATE "C" CHECK (blotter_hhmm_ok(cutoff_time)),
    american      bigint           NOT NULL CHECK (american IN (0, 1)),
    multiplier    double precision NOT NULL CHECK (multiplier > 0),
    cash_settled  bigint           NOT NULL CHECK (cash_settled IN (0, 1)),
    CHECK ((option_type = 'U' AND strike IS NULL AND expiry IS NULL AND cutoff_time IS NULL)
        OR (option_type IN ('C', 'P') AND strike IS NOT NULL AND expiry IS NOT NULL
            AND cutoff_time IS NOT NULL))
);
CREATE UNIQUE INDEX contract_terms ON contract (
    underlying_id, option_type, coalesce(expiry, ''), coalesce(strike, 0), american, multiplier,
    cash_settled);

CREATE TABLE book (
    book_id     bigint           PRIMARY KEY,
    name        text COLLATE "C" NOT NULL UNIQUE CHECK (length(name) BETWEEN 1 AND 64),
    description text COLLATE "C" NOT NULL DEFAULT ''
);

CREATE TABLE trade (
    trade_id    bigint           PRIMARY KEY,
    book_id     bigint           NOT NULL REFERENCES book (book_id),
    contract_id bigint           NOT NULL REFERENCES contract (contract_id),
    quantity    bigint           NOT NULL CHECK (quantity <> 0),
    price       double precision NOT NULL CHECK (price >= 0 AND price < 1e12),
    trade_time  text COLLATE "C" NOT NULL CHECK (blotter_instant_ok(trade_time)),
    booked_at   text COLLATE "C" NOT NULL CHECK (blotter_instant_ok(booked_at)),
    who         text COLLATE "C" NOT NULL CHECK (length(who) > 0),
    source      text COLLATE "C" NOT NULL
                CHECK (source IN ('typed', 'exercise', 'demo') OR source ~ '^file:.'),
    note        text COLLATE "C" NOT NULL DEFAULT '',
    replaces    bigint           REFERENCES trade (trade_id),
    CHECK (trade_time <= booked_at),
    CHECK (replaces IS NULL OR replaces < trade_id)
);
CREATE INDEX trade_contract ON trade (contract_id);
CREATE INDEX trade_booked ON trade (booked_at);
CREATE UNIQUE INDEX trade_replaced_once ON trade (replaces) WHERE replaces IS NOT NULL;

CREATE TABLE trade_cancel (
    cancel_id    bigint           PRIMARY KEY,
    trade_id     bigint           NOT NULL UNIQUE REFERENCES trade (trade_id),
    reason       text COLLATE "C" NOT NULL CHECK (length(trim(reason)) > 0),
    cancelled_at text COLLATE "C" NOT NULL CHECK (blotter_instant_ok(cancelled_at)),
    who          text COLLATE "C" NOT NULL CHECK (length(who) > 0)
);

CREATE TABLE mark_set (
    mark_set_id   bigint           PRIMARY KEY,
    kind          text COLLATE "C" NOT NULL CHECK (kind IN ('close', 'intraday')),
    marked_at     text COLLATE "C" NOT NULL CHECK (blotter_instant_ok(marked_at)),
    who           text COLLATE "C" NOT NULL CHECK (length(who) > 0),
    note          text COLLATE "C" NOT NULL DEFAULT '',
    source        text COLLATE "C" NOT NULL
                  CHECK (source IN ('typed', 'close', 'demo') OR source ~ '^file:.'),
    corrects      bigint           REFERENCES mark_set (mark_set_id),
    mark_count    bigint           NOT NULL CHECK (mark_count >= 1),
    business_date text COLLATE "C" CHECK (blotter_date_ok(business_date)),
    CHECK (corrects IS NULL OR (kind = 'close' AND corrects < mark_set_id))
);
CREATE UNIQUE INDEX mark_set_corrected_once ON mark_set (corrects) WHERE corrects IS NOT NULL;
CREATE INDEX mark_set_close_day ON mark_set (business_date) WHERE business_date IS NOT NULL;

CREATE TABLE mark (
    mark_id       bigint           PRIMARY KEY,
    mark_set_id   bigint           NOT NULL REFERENCES mark_set (mark_set_id),
    seq           bigint           NOT NULL CHECK (seq >= 1),
    kind          text COLLATE "C" NOT NULL CHECK (kind IN ('spot', 'vol', 'rate', 'div_yield')),
    underlying_id bigint           REFERENCES underlying (underlying_id),
    currency      text COLLATE "C",
    expiry        text COLLATE "C" CHECK (blotter_date_ok(expiry)),
    strike        double precision CHECK (strike > 0),
    tenor_days    bigint           CHECK (tenor_days BETWEEN 1 AND 36500),
    value         double precision NOT NULL,
    observed_at   text COLLATE "C" CHECK (blotter_instant_ok(observed_at)),
    CHECK (
        (kind = 'spot' AND underlying_id IS NOT NULL AND currency IS NULL AND expiry IS NULL
            AND strike IS NULL AND tenor_days IS NULL AND value > 0 AND value < 1e12)
        OR (kind = 'vol' AND underlying_id IS NOT NULL AND currency IS NULL AND expiry IS NOT NULL
            AND tenor_days IS NULL AND value > 0 AND value <= 10)
        OR (kind = 'rate' AND underlying_id IS NULL AND length(currency) = 3
            AND upper(currency) = currency AND expiry IS NULL AND strike IS NULL
            AND tenor_days IS NOT NULL AND value BETWEEN -1 AND 1)
        OR (kind = 'div_yield' AND underlying_id IS NOT NULL AND currency IS NULL
            AND expiry IS NULL AND strike IS NULL AND tenor_days IS NULL AND value BETWEEN -1 AND 1))
);
CREATE UNIQUE INDEX mark_seq ON mark (mark_set_id, seq);
CREATE UNIQUE INDEX mark_point ON mark (
    mark_set_id, kind, coalesce(underlying_id, 0), coalesce(currency, ''), coalesce(expiry, ''),
    coalesce(strike, 0), coalesce(tenor_days, 0));

CREATE TABLE desk_note (
    note_id    bigint           PRIMARY KEY,
    written_at text COLLATE "C" NOT NULL CHECK (blotter_instant_ok(written_at)),
    who        text COLLATE "C" NOT NULL CHECK (length(who) > 0),
    text       text COLLATE "C" NOT NULL CHECK (length(text) > 0)
);

CREATE TABLE import_file (
    import_id   bigint           PRIMARY KEY,
    kind        text COLLATE "C" NOT NULL CHECK (kind IN ('trades', 'marks')),
    file_name   text COLLATE "C" NOT NULL CHECK (length(file_name) > 0),
    sha256      text COLLATE "C" NOT NULL CHECK (length(sha256) = 64),
    rows        bigint           NOT NULL CHECK (rows >= 1),
    imported_at text COLLATE "C" NOT NULL CHECK (blotter_instant_ok(imported_at)),
    who         text COLLATE "C" NOT NULL CHECK (length(who) > 0),
    first_id    bigint           NOT NULL,
    last_id     bigint           NOT NULL,
    UNIQUE (kind, sha256)
);

CREATE TABLE history (
    seq    bigint           PRIMARY KEY,
    kind   text COLLATE "C" NOT NULL CHECK (kind IN ('trade', 'cancel', 'mark_set')),
    row_id bigint           NOT NULL,
    UNIQUE (kind, row_id)
);

CREATE TABLE book_zone (
    only_row bigint           PRIMARY KEY CHECK (only_row = 1),
    zone     text COLLATE "C" NOT NULL CHECK (length(zone) BETWEEN 1 AND 64)
);

CREATE TABLE underlying_correction (
    correction_id bigint           PRIMARY KEY,
    underlying_id bigint           NOT NULL REFERENCES underlying (underlying_id),
    corrected_at  text COLLATE "C" NOT NULL CHECK (length(corrected_at) = 27),
    who           text COLLATE "C" NOT NULL CHECK (length(who) BETWEEN 1 AND 64),
    reason        text COLLATE "C" NOT NULL CHECK (length(reason) BETWEEN 1 AND 500),
    description   text COLLATE "C" CHECK (description IS NULL OR length(description) <= 200),
    multiplier    double precision CHECK (multiplier IS NULL OR multiplier > 0),
    beta          double precision CHECK (beta IS NULL OR beta BETWEEN -20 AND 20),
    calendar      text COLLATE "C" CHECK (calendar IS NULL OR length(calendar) BETWEEN 1 AND 32),
    tick          double precision CHECK (tick IS NULL OR (tick > 0 AND tick <= 1000)),
    CHECK (description IS NOT NULL OR multiplier IS NOT NULL OR beta IS NOT NULL
           OR calendar IS NOT NULL OR tick IS NOT NULL)
);
CREATE INDEX underlying_correction_by_underlying ON underlying_correction (underlying_id);

CREATE TABLE base_currency (
    base_id  bigint           PRIMARY KEY,
    currency text COLLATE "C" NOT NULL CHECK (currency ~ '^[A-Z]{3}$'),
    set_at   text COLLATE "C" CHECK (blotter_instant_ok(set_at)),
    who      text COLLATE "C" CHECK (length(who) > 0),
    CHECK ((set_at IS NULL) = (who IS NULL)),
    CHECK ((base_id = 1) = (set_at IS NULL))
);

-- One writer at a time, as BEGIN IMMEDIATE makes it in SQLite: every insert first takes the
-- book's transaction-level advisory lock (the key is the application id), held to the commit or
-- rollback, so a second writer waits at its first insert and then reads the first's committed
-- rows (READ COMMITTED takes a new snapshot per statement). Then a row given no id takes one
-- more than the largest of its table (TG_ARGV[0] names the id), as SQLite numbers them.
CREATE FUNCTION blotter_next_id() RETURNS trigger
LANGUAGE plpgsql AS $$
DECLARE
    next_id bigint;
BEGIN
    PERFORM pg_advisory_xact_lock(1114403954);
    IF to_jsonb(NEW) -> TG_ARGV[0] = 'null'::jsonb THEN
        EXECUTE format('SELECT coalesce(max(%I), 0) + 1 FROM %I.%I',
                       TG_ARGV[0], TG_TABLE_SCHEMA, TG_TABLE_NAME) INTO next_id;
        NEW := jsonb_populate_record(NEW, jsonb_build_object(TG_ARGV[0], next_id));
    END IF;
    RETURN NEW;
END $$;

-- Named a_... so it fires before the other BEFORE INSERT triggers of its table (PostgreSQL fires
-- them in name order), which then see the row's id.
DO $$
DECLARE
    t text[];
BEGIN
    FOREACH t SLICE 1 IN ARRAY ARRAY[
        ['underlying', 'underlying_id'],
        ['contract', 'contract_id'],
        ['book', 'book_id'],
        ['trade', 'trade_id'],
        ['trade_cancel', 'cancel_id'],
        ['mark_set', 'mark_set_id'],
        ['mark', 'mark_id'],
        ['desk_note', 'note_id'],
        ['import_file', 'import_id'],
        ['history', 'seq'],
        ['underlying_correction', 'correction_id'],
        ['base_currency', 'base_id']]
    LOOP
        EXECUTE format('CREATE TRIGGER a_next_id BEFORE INSERT ON %I FOR EACH ROW '
                       'EXECUTE FUNCTION blotter_next_id(%L)', t[1], t[2]);
    END LOOP;
END $$;

-- Append-only history: the message is TG_ARGV[0], SQLite's words for the same refusal.
CREATE FUNCTION blotter_refuse() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    RAISE EXCEPTION '%', TG_ARGV[0] USING ERRCODE = 'integrity_constraint_violation';
END $$;

CREATE TRIGGER no_update BEFORE UPDATE ON underlying FOR EACH ROW EXECUTE FUNCTION blotter_refuse('underlyings are never changed once written');
CREATE TRIGGER no_delete BEFORE DELETE ON underlying FOR EACH ROW EXECUTE FUNCTION blotter_refuse('underlyings are never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON contract FOR EACH ROW EXECUTE FUNCTION blotter_refuse('contracts are never changed once written');
CREATE TRIGGER no_delete BEFORE DELETE ON contract FOR EACH ROW EXECUTE FUNCTION blotter_refuse('contracts are never deleted');
CREATE TRIGGER no_delete BEFORE DELETE ON book FOR EACH ROW EXECUTE FUNCTION blotter_refuse('books are never deleted');
CREATE TRIGGER no_rename BEFORE UPDATE OF name ON book FOR EACH ROW EXECUTE FUNCTION blotter_refuse('books are never renamed');
CREATE TRIGGER no_update BEFORE UPDATE ON trade FOR EACH ROW EXECUTE FUNCTION blotter_refuse('trades are never changed: cancel or amend instead');
CREATE TRIGGER no_delete BEFORE DELETE ON trade FOR EACH ROW EXECUTE FUNCTION blotter_refuse('trades are never deleted: cancel instead');
CREATE TRIGGER no_update BEFORE UPDATE ON trade_cancel FOR EACH ROW EXECUTE FUNCTION blotter_refuse('cancels are never changed');
CREATE TRIGGER no_delete BEFORE DELETE ON trade_cancel FOR EACH ROW EXECUTE FUNCTION blotter_refuse('cancels are never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON mark_set FOR EACH ROW EXECUTE FUNCTION blotter_refuse('mark sets are never changed: commit a correcting set');
CREATE TRIGGER no_delete BEFORE DELETE ON mark_set FOR EACH ROW EXECUTE FUNCTION blotter_refuse('mark sets are never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON mark FOR EACH ROW EXECUTE FUNCTION blotter_refuse('marks are never changed: log a new mark');
CREATE TRIGGER no_delete BEFORE DELETE ON mark FOR EACH ROW EXECUTE FUNCTION blotter_refuse('marks are never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON desk_note FOR EACH ROW EXECUTE FUNCTION blotter_refuse('notes are never changed');
CREATE TRIGGER no_delete BEFORE DELETE ON desk_note FOR EACH ROW EXECUTE FUNCTION blotter_refuse('notes are never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON import_file FOR EACH ROW EXECUTE FUNCTION blotter_refuse('import records are never changed');
CREATE TRIGGER no_delete BEFORE DELETE ON import_file FOR EACH ROW EXECUTE FUNCTION blotter_refuse('import records are never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON history FOR EACH ROW EXECUTE FUNCTION blotter_refuse('the store''s order of history is never changed');
CREATE TRIGGER no_delete BEFORE DELETE ON history FOR EACH ROW EXECUTE FUNCTION blotter_refuse('the store''s order of history is never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON book_zone FOR EACH ROW EXECUTE FUNCTION blotter_refuse('the book''s desk zone is never changed');
CREATE TRIGGER no_delete BEFORE DELETE ON book_zone FOR EACH ROW EXECUTE FUNCTION blotter_refuse('the book''s desk zone is never deleted');
CREATE TRIGGER no_update BEFORE UPDATE ON underlying_correction FOR EACH ROW EXECUTE FUNCTION blotter_refuse('underlying corrections are never changed: record a new one');
CREATE TRIGGER no_delete BEFORE DELETE ON underlying_correction FOR EACH ROW EXECUTE FUNCTION blotter_refuse('underlying corrections are never deleted: record a new one');
CREATE TRIGGER no_update BEFORE UPDATE ON base_currency FOR EACH ROW EXECUTE FUNCTION blotter_refuse('the base currency is never changed in place: record a new one');
CREATE TRIGGER no_delete BEFORE DELETE ON base_currency FOR EACH ROW EXECUTE FUNCTION blotter_refuse('base currency rows are never deleted: record a new one');
CREATE TRIGGER no_update BEFORE UPDATE ON blotter_meta FOR EACH ROW WHEN (NEW.application_id <> OLD.application_id) EXECUTE FUNCTION blotter_refuse('the book''s application id is never changed');
CREATE TRIGGER no_delete BEFORE DELETE ON blotter_meta FOR EACH ROW EXECUTE FUNCTION blotter_refuse('the book''s version row is never deleted');

-- TRUNCATE fires no row trigger: refused for every table at once.
DO $$
DECLARE
    t text;
BEGIN
    FOREACH t IN ARRAY ARRAY['underlying', 'contract', 'book', 'trade', 'trade_cancel', 'mark_set',
                             'mark', 'desk_note', 'import_file', 'history', 'book_zone',
                             'underlying_correction', 'base_currency', 'blotter_meta']
    LOOP
        EXECUTE format('CREATE TRIGGER no_truncate BEFORE TRUNCATE ON %I FOR EACH STATEMENT '
                       'EXECUTE FUNCTION blotter_refuse(%L)', t,
                       'a book''s tables are never truncated');
    END LOOP;
END $$;

-- Rules that span tables (schema.sql: trade_before_expiry, trade_replaces_cancelled,
-- mark_set_corrects_close, mark_set_business_date, mark_set_one_close_a_day,
-- mark_set_correction_same_day, mark_within_set, mark_observed), with SQLite's words.
CREATE FUNCTION blotter_trade_rules() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF (SELECT expiry::date + 1 FROM contract WHERE contract_id = NEW.contract_id)
       < substr(NEW.trade_time, 1, 10)::date THEN
        RAISE EXCEPTION 'trade date is more than a day after the contract''s expiry date'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    IF NEW.replaces IS NOT NULL
       AND NOT EXISTS (SELECT 1 FROM trade_cancel WHERE trade_id = NEW.replaces) THEN
        RAISE EXCEPTION 'an amending trade must replace a cancelled trade'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    RETURN NEW;
END $$;
CREATE TRIGGER rules BEFORE INSERT ON trade FOR EACH ROW EXECUTE FUNCTION blotter_trade_rules();

CREATE FUNCTION blotter_mark_set_rules() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF NEW.corrects IS NOT NULL
       AND (SELECT kind FROM mark_set WHERE mark_set_id = NEW.corrects) IS DISTINCT FROM 'close' THEN
        RAISE EXCEPTION 'a correcting set must name a close set'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    IF (NEW.kind = 'close') IS DISTINCT FROM (NEW.business_date IS NOT NULL) THEN
        RAISE EXCEPTION 'a close set names its business date and an intraday set none'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    IF NEW.kind = 'close' AND NEW.corrects IS NULL AND EXISTS (
        SELECT 1 FROM mark_set WHERE kind = 'close' AND business_date = NEW.business_date) THEN
        RAISE EXCEPTION 'that business date has a close already: write a correction of it'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    IF NEW.corrects IS NOT NULL AND NEW.business_date IS DISTINCT FROM
        (SELECT business_date FROM mark_set WHERE mark_set_id = NEW.corrects) THEN
        RAISE EXCEPTION 'a correction closes the business date of the close it corrects'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    RETURN NEW;
END $$;
CREATE TRIGGER rules BEFORE INSERT ON mark_set FOR EACH ROW EXECUTE FUNCTION blotter_mark_set_rules();

CREATE FUNCTION blotter_mark_rules() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF NEW.seq > (SELECT mark_count FROM mark_set WHERE mark_set_id = NEW.mark_set_id) THEN
        RAISE EXCEPTION 'the mark set is complete: marks cannot be added to it'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    IF NEW.observed_at IS NULL THEN
        RAISE EXCEPTION 'a mark names when it was observed'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    RETURN NEW;
END $$;
CREATE TRIGGER rules BEFORE INSERT ON mark FOR EACH ROW EXECUTE FUNCTION blotter_mark_rules();

CREATE FUNCTION blotter_book_zone_rules() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    IF EXISTS (SELECT 1 FROM book_zone) THEN
        RAISE EXCEPTION 'the book''s desk zone is never replaced'
            USING ERRCODE = 'integrity_constraint_violation';
    END IF;
    RETURN NEW;
END $$;
CREATE TRIGGER rules BEFORE INSERT ON book_zone FOR EACH ROW EXECUTE FUNCTION blotter_book_zone_rules();

-- The store's order of history: each trade, cancel and mark set takes the next number as it is
-- written. The advisory lock, held to the end of the transaction, lets one writer of history at
-- a time past this point, so the numbers follow commit order (the key is the application id).
-- It runs as the schema's owner, so the writer role needs no INSERT on history and cannot
-- number rows of its own.
CREATE FUNCTION blotter_in_history() RETURNS trigger
LANGUAGE plpgsql SECURITY DEFINER SET search_path = public, pg_temp AS $$
BEGIN
    PERFORM pg_advisory_xact_lock(1114403954);
    EXECUTE 'INSERT INTO history (kind, row_id) VALUES ($1, $2)'
        USING TG_ARGV[0], (to_jsonb(NEW) ->> TG_ARGV[1])::bigint;
    RETURN NULL;
END $$;
CREATE TRIGGER in_history AFTER INSERT ON trade FOR EACH ROW EXECUTE FUNCTION blotter_in_history('trade', 'trade_id');
CREATE TRIGGER in_history AFTER INSERT ON trade_cancel FOR EACH ROW EXECUTE FUNCTION blotter_in_history('cancel', 'cancel_id');
CREATE TRIGGER in_history AFTER INSERT ON mark_set FOR EACH ROW EXECUTE FUNCTION blotter_in_history('mark_set', 'mark_set_id');

-- Live refresh: a commit that wrote any table tells every listener on blotter_book (PostgreSQL
-- sends notifications at commit, one per distinct payload, none for a rolled-back transaction).
CREATE FUNCTION blotter_notify() RETURNS trigger
LANGUAGE plpgsql AS $$
BEGIN
    PERFORM pg_notify('blotter_book', TG_TABLE_NAME);
    RETURN NULL;
END $$;
CREATE TRIGGER notify AFTER INSERT OR UPDATE ON underlying FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT OR UPDATE ON contract FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT OR UPDATE ON book FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT ON trade FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT ON trade_cancel FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT ON mark_set FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT ON desk_note FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT ON underlying_correction FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER INSERT ON base_currency FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();
CREATE TRIGGER notify AFTER UPDATE ON blotter_meta FOR EACH STATEMENT EXECUTE FUNCTION blotter_notify();

-- Privileges: the writer reads and appends, the reader reads; neither may change history.
REVOKE ALL ON ALL TABLES IN SCHEMA public FROM PUBLIC;
GRANT SELECT ON ALL TABLES IN SCHEMA public TO blotter_reader, blotter_writer;
GRANT INSERT ON underlying, contract, book, trade, trade_cancel, mark_set, mark, desk_note,
    import_file, underlying_correction, base_currency TO blotter_writer;
GRANT UPDATE (description) ON book TO blotter_writer;
