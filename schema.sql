-- blotter: the whole store. This file is the only definition of the database.
--
-- It is read in numbered sections. A new book runs every section in order; an older book runs
-- the sections above its PRAGMA user_version, each in its own transaction together with the new
-- user_version (blotter/store/db.py). A section, once released, is never edited: a change to the
-- schema is a new section.
--
-- Conventions:
--   * every table is STRICT; foreign keys are enforced (the store turns them on per connection);
--   * instants are UTC ISO-8601 text, exactly 'YYYY-MM-DDTHH:MM:SS.ffffffZ' (so text order is
--     time order); dates are 'YYYY-MM-DD'; exchange cut-off times are local 'HH:MM';
--   * history is append-only: triggers refuse UPDATE and DELETE of trades, cancels, mark sets,
--     marks, contracts and underlyings. A cancel is its own row; an amend is a cancel plus a new
--     trade naming the one it replaces; a corrected close is a new close set naming the old one;
--   * marks are stored as the points that were marked (no interpolated values): the market layer
--     interpolates.

-- @version 1 ------------------------------------------------------------------------------------

CREATE TABLE underlying (
    underlying_id INTEGER PRIMARY KEY,
    symbol        TEXT    NOT NULL UNIQUE CHECK (length(symbol) BETWEEN 1 AND 64),
    description   TEXT    NOT NULL DEFAULT '',
    kind          TEXT    NOT NULL CHECK (kind IN ('stock', 'index', 'future', 'fx')),
    currency      TEXT    NOT NULL CHECK (length(currency) = 3 AND upper(currency) = currency),
    multiplier    REAL    NOT NULL CHECK (multiplier > 0),             -- default units per contract
    american      INTEGER NOT NULL CHECK (american IN (0, 1)),         -- default exercise style
    cash_settled  INTEGER NOT NULL CHECK (cash_settled IN (0, 1)),     -- default settlement
    div_yield     REAL    NOT NULL DEFAULT 0 CHECK (div_yield BETWEEN -1 AND 1),  -- decimal, cont.
    beta          REAL    NOT NULL DEFAULT 1 CHECK (beta BETWEEN -20 AND 20),     -- to reference
    is_reference  INTEGER NOT NULL DEFAULT 0 CHECK (is_reference IN (0, 1)),      -- the book's index
    calendar      TEXT    NOT NULL DEFAULT 'NYSE' CHECK (length(calendar) > 0),   -- holiday calendar
    time_zone     TEXT    NOT NULL DEFAULT 'America/New_York' CHECK (length(time_zone) > 0),
    cutoff_time   TEXT    NOT NULL DEFAULT '16:00'
                  CHECK (length(cutoff_time) = 5 AND time(cutoff_time || ':00', '+0 days') IS cutoff_time || ':00')
) STRICT;

CREATE UNIQUE INDEX underlying_one_reference ON underlying (is_reference) WHERE is_reference = 1;

-- A contract is a call or put ('C', 'P') or the underlying itself ('U', for stock or futures
-- hedges, which have no strike and no expiry).
CREATE TABLE contract (
    contract_id   INTEGER PRIMARY KEY,
    underlying_id INTEGER NOT NULL REFERENCES underlying (underlying_id),
    option_type   TEXT    NOT NULL CHECK (option_type IN ('C', 'P', 'U')),
    strike        REAL    CHECK (strike > 0),
    expiry        TEXT    CHECK (date(expiry, '+0 days') IS expiry),
    cutoff_time   TEXT    CHECK (length(cutoff_time) = 5 AND time(cutoff_time || ':00', '+0 days') IS cutoff_time || ':00'),
    american      INTEGER NOT NULL CHECK (american IN (0, 1)),
    multiplier    REAL    NOT NULL CHECK (multiplier > 0),
    cash_settled  INTEGER NOT NULL CHECK (cash_settled IN (0, 1)),
    CHECK ((option_type = 'U' AND strike IS NULL AND expiry IS NULL AND cutoff_time IS NULL)
        OR (option_type IN ('C', 'P') AND strike IS NOT NULL AND expiry IS NOT NULL
            AND cutoff_time IS NOT NULL))
) STRICT;

CREATE UNIQUE INDEX contract_terms ON contract (
    underlying_id, option_type, coalesce(expiry, ''), coalesce(strike, 0), american, multiplier,
    cash_settled);

CREATE TABLE book (
    book_id     INTEGER PRIMARY KEY,
    name        TEXT    NOT NULL UNIQUE CHECK (length(name) BETWEEN 1 AND 64),
    description TEXT    NOT NULL DEFAULT ''
) STRICT;

-- price: per unit of underlying, as quoted (an option's premium per share); the trade's cash is
-- quantity x multiplier x price. trade_time: when it was dealt; booked_at: when it was entered.
-- source: 'typed', 'exercise', 'demo', or 'file:<name>' for an import.
CREATE TABLE trade (
    trade_id    INTEGER PRIMARY KEY,
    book_id     INTEGER NOT NULL REFERENCES book (book_id),
    contract_id INTEGER NOT NULL REFERENCES contract (contract_id),
    quantity    INTEGER NOT NULL CHECK (quantity <> 0),
    price       REAL    NOT NULL CHECK (price >= 0 AND price < 1e12),
    trade_time  TEXT    NOT NULL CHECK (
        trade_time GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
        AND datetime(substr(trade_time, 1, 19), '+0 days') IS replace(substr(trade_time, 1, 19), 'T', ' ')),
    booked_at   TEXT    NOT NULL CHECK (
        booked_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
        AND datetime(substr(booked_at, 1, 19), '+0 days') IS replace(substr(booked_at, 1, 19), 'T', ' ')),
    who         TEXT    NOT NULL CHECK (length(who) > 0),
    source      TEXT    NOT NULL CHECK (source IN ('typed', 'exercise', 'demo') OR source GLOB 'file:?*'),
    note        TEXT    NOT NULL DEFAULT '',
    replaces    INTEGER REFERENCES trade (trade_id),
    CHECK (trade_time <= booked_at),
    CHECK (replaces IS NULL OR replaces < trade_id)
) STRICT;

CREATE INDEX trade_contract ON trade (contract_id);
CREATE INDEX trade_booked ON trade (booked_at);
CREATE UNIQUE INDEX trade_replaced_once ON trade (replaces) WHERE replaces IS NOT NULL;

CREATE TABLE trade_cancel (
    cancel_id    INTEGER PRIMARY KEY,
    trade_id     INTEGER NOT NULL UNIQUE REFERENCES trade (trade_id),
    reason       TEXT    NOT NULL CHECK (length(trim(reason)) > 0),
    cancelled_at TEXT    NOT NULL CHECK (
        cancelled_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
        AND datetime(substr(cancelled_at, 1, 19), '+0 days') IS replace(substr(cancelled_at, 1, 19), 'T', ' ')),
    who          TEXT    NOT NULL CHECK (length(who) > 0)
) STRICT;

-- A mark set is written whole in one transaction: mark_count is the number of its marks, and a
-- trigger refuses a mark beyond it, so a committed set can never gain or lose a point.
CREATE TABLE mark_set (
    mark_set_id INTEGER PRIMARY KEY,
    kind        TEXT    NOT NULL CHECK (kind IN ('close', 'intraday')),
    marked_at   TEXT    NOT NULL CHECK (
        marked_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
        AND datetime(substr(marked_at, 1, 19), '+0 days') IS replace(substr(marked_at, 1, 19), 'T', ' ')),
    who         TEXT    NOT NULL CHECK (length(who) > 0),
    note        TEXT    NOT NULL DEFAULT '',
    source      TEXT    NOT NULL CHECK (source IN ('typed', 'close', 'demo') OR source GLOB 'file:?*'),
    corrects    INTEGER REFERENCES mark_set (mark_set_id),
    mark_count  INTEGER NOT NULL CHECK (mark_count >= 1),
    CHECK (corrects IS NULL OR (kind = 'close' AND corrects < mark_set_id))
) STRICT;

CREATE UNIQUE INDEX mark_set_corrected_once ON mark_set (corrects) WHERE corrects IS NOT NULL;

-- One marked point. kind 'spot': underlying price; 'vol': implied vol (decimal) of an underlying
-- at an expiry and a strike (NULL strike = the ATM vol of that expiry); 'rate': continuously
-- compounded zero rate (decimal) of a currency at a tenor in calendar days; 'div_yield':
-- dividend yield or foreign rate (decimal) overriding the underlying's default.
CREATE TABLE mark (
    mark_id       INTEGER PRIMARY KEY,
    mark_set_id   INTEGER NOT NULL REFERENCES mark_set (mark_set_id),
    seq           INTEGER NOT NULL CHECK (seq >= 1),
    kind          TEXT    NOT NULL CHECK (kind IN ('spot', 'vol', 'rate', 'div_yield')),
    underlying_id INTEGER REFERENCES underlying (underlying_id),
    currency      TEXT,
    expiry        TEXT    CHECK (date(expiry, '+0 days') IS expiry),
    strike        REAL    CHECK (strike > 0),
    tenor_days    INTEGER CHECK (tenor_days BETWEEN 1 AND 36500),
    value         REAL    NOT NULL,
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
) STRICT;

CREATE UNIQUE INDEX mark_seq ON mark (mark_set_id, seq);
CREATE UNIQUE INDEX mark_point ON mark (
    mark_set_id, kind, coalesce(underlying_id, 0), coalesce(currency, ''), coalesce(expiry, ''),
    coalesce(strike, 0), coalesce(tenor_days, 0));

-- Free notes about the desk or the file (the demo book says here that it is invented).
CREATE TABLE desk_note (
    note_id    INTEGER PRIMARY KEY,
    written_at TEXT    NOT NULL CHECK (
        written_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
        AND datetime(substr(written_at, 1, 19), '+0 days') IS replace(substr(written_at, 1, 19), 'T', ' ')),
    who        TEXT    NOT NULL CHECK (length(who) > 0),
    text       TEXT    NOT NULL CHECK (length(text) > 0)
) STRICT;

-- Append-only history.
CREATE TRIGGER underlying_no_update BEFORE UPDATE ON underlying
BEGIN SELECT RAISE(ABORT, 'underlyings are never changed once written'); END;
CREATE TRIGGER underlying_no_delete BEFORE DELETE ON underlying
BEGIN SELECT RAISE(ABORT, 'underlyings are never deleted'); END;
CREATE TRIGGER contract_no_update BEFORE UPDATE ON contract
BEGIN SELECT RAISE(ABORT, 'contracts are never changed once written'); END;
CREATE TRIGGER contract_no_delete BEFORE DELETE ON contract
BEGIN SELECT RAISE(ABORT, 'contracts are never deleted'); END;
CREATE TRIGGER book_no_delete BEFORE DELETE ON book
BEGIN SELECT RAISE(ABORT, 'books are never deleted'); END;
CREATE TRIGGER book_no_rename BEFORE UPDATE OF name ON book
BEGIN SELECT RAISE(ABORT, 'books are never renamed'); END;
CREATE TRIGGER trade_no_update BEFORE UPDATE ON trade
BEGIN SELECT RAISE(ABORT, 'trades are never changed: cancel or amend instead'); END;
CREATE TRIGGER trade_no_delete BEFORE DELETE ON trade
BEGIN SELECT RAISE(ABORT, 'trades are never deleted: cancel instead'); END;
CREATE TRIGGER trade_cancel_no_update BEFORE UPDATE ON trade_cancel
BEGIN SELECT RAISE(ABORT, 'cancels are never changed'); END;
CREATE TRIGGER trade_cancel_no_delete BEFORE DELETE ON trade_cancel
BEGIN SELECT RAISE(ABORT, 'cancels are never deleted'); END;
CREATE TRIGGER mark_set_no_update BEFORE UPDATE ON mark_set
BEGIN SELECT RAISE(ABORT, 'mark sets are never changed: commit a correcting set'); END;
CREATE TRIGGER mark_set_no_delete BEFORE DELETE ON mark_set
BEGIN SELECT RAISE(ABORT, 'mark sets are never deleted'); END;
CREATE TRIGGER mark_no_update BEFORE UPDATE ON mark
BEGIN SELECT RAISE(ABORT, 'marks are never changed: log a new mark'); END;
CREATE TRIGGER mark_no_delete BEFORE DELETE ON mark
BEGIN SELECT RAISE(ABORT, 'marks are never deleted'); END;
CREATE TRIGGER desk_note_no_update BEFORE UPDATE ON desk_note
BEGIN SELECT RAISE(ABORT, 'notes are never changed'); END;
CREATE TRIGGER desk_note_no_delete BEFORE DELETE ON desk_note
BEGIN SELECT RAISE(ABORT, 'notes are never deleted'); END;

-- Rules that span tables.
CREATE TRIGGER trade_before_expiry BEFORE INSERT ON trade
WHEN (SELECT expiry FROM contract WHERE contract_id = NEW.contract_id) < substr(NEW.trade_time, 1, 10)
BEGIN SELECT RAISE(ABORT, 'trade date is after the contract''s expiry date'); END;

CREATE TRIGGER trade_replaces_cancelled BEFORE INSERT ON trade
WHEN NEW.replaces IS NOT NULL
 AND NOT EXISTS (SELECT 1 FROM trade_cancel WHERE trade_id = NEW.replaces)
BEGIN SELECT RAISE(ABORT, 'an amending trade must replace a cancelled trade'); END;

CREATE TRIGGER trade_cancel_after_booking BEFORE INSERT ON trade_cancel
WHEN NEW.cancelled_at < (SELECT booked_at FROM trade WHERE trade_id = NEW.trade_id)
BEGIN SELECT RAISE(ABORT, 'a cancel cannot come before the trade was booked'); END;

CREATE TRIGGER mark_set_corrects_close BEFORE INSERT ON mark_set
WHEN NEW.corrects IS NOT NULL
 AND (SELECT kind FROM mark_set WHERE mark_set_id = NEW.corrects) IS NOT 'close'
BEGIN SELECT RAISE(ABORT, 'a correcting set must name a close set'); END;

CREATE TRIGGER mark_within_set BEFORE INSERT ON mark
WHEN NEW.seq > (SELECT mark_count FROM mark_set WHERE mark_set_id = NEW.mark_set_id)
BEGIN SELECT RAISE(ABORT, 'the mark set is complete: marks cannot be added to it'); END;

-- @version 2 ------------------------------------------------------------------------------------

-- Every imported file, by content hash, so the same file cannot land twice and an import that
-- was killed half-way (and so left nothing) can simply be run again.
CREATE TABLE import_file (
    import_id   INTEGER PRIMARY KEY,
    kind        TEXT    NOT NULL CHECK (kind IN ('trades', 'marks')),
    file_name   TEXT    NOT NULL CHECK (length(file_name) > 0),
    sha256      TEXT    NOT NULL CHECK (length(sha256) = 64),
    rows        INTEGER NOT NULL CHECK (rows >= 1),
    imported_at TEXT    NOT NULL CHECK (
        imported_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
        AND datetime(substr(imported_at, 1, 19), '+0 days') IS replace(substr(imported_at, 1, 19), 'T', ' ')),
    who         TEXT    NOT NULL CHECK (length(who) > 0),
    first_id    INTEGER NOT NULL,   -- first trade_id or the mark_set_id the file produced
    last_id     INTEGER NOT NULL,
    UNIQUE (kind, sha256)
) STRICT;

CREATE TRIGGER import_file_no_update BEFORE UPDATE ON import_file
BEGIN SELECT RAISE(ABORT, 'import records are never changed'); END;
CREATE TRIGGER import_file_no_delete BEFORE DELETE ON import_file
BEGIN SELECT RAISE(ABORT, 'import records are never deleted'); END;

-- @version 3 ------------------------------------------------------------------------------------

-- The exact rule (no trade after the contract's cut-off instant in its exchange's time zone) is
-- checked in Python, which knows the time zone. This backstop compares dates only, so it allows a
-- day's slack: a legal trade dealt before the cut-off on expiry day can carry the next UTC date.
DROP TRIGGER trade_before_expiry;
CREATE TRIGGER trade_before_expiry BEFORE INSERT ON trade
WHEN date((SELECT expiry FROM contract WHERE contract_id = NEW.contract_id), '+1 day')
     < substr(NEW.trade_time, 1, 10)
BEGIN SELECT RAISE(ABORT, 'trade date is more than a day after the contract''s expiry date'); END;

-- @version 4 ------------------------------------------------------------------------------------

-- The store's own order of history: every trade, cancel and mark set takes the next number here
-- as it is written (AFTER INSERT triggers, so no writer can leave it out). Writes are serialised
-- by BEGIN IMMEDIATE, so the numbers follow commit order whatever the writers' clocks say. Rules
-- between history rows use this order (a cancel follows its trade, a close holds the trades
-- written before it, explain's periods); the rows keep their clock times beside it.
CREATE TABLE history (
    seq    INTEGER PRIMARY KEY,
    kind   TEXT    NOT NULL CHECK (kind IN ('trade', 'cancel', 'mark_set')),
    row_id INTEGER NOT NULL,
    UNIQUE (kind, row_id)
) STRICT;

-- Rows written before this section are numbered by their clock times (the only order they
-- kept); at one instant a trade comes before a cancel, a cancel before the replacing trade of an
-- amend, and those before a mark set (the order the store writes them in), then by id.
INSERT INTO history (kind, row_id)
SELECT kind, row_id FROM (
    SELECT 'trade' AS kind, trade_id AS row_id, booked_at AS at,
           CASE WHEN replaces IS NULL THEN 0 ELSE 2 END AS rank FROM trade
    UNION ALL SELECT 'cancel', cancel_id, cancelled_at, 1 FROM trade_cancel
    UNION ALL SELECT 'mark_set', mark_set_id, marked_at, 3 FROM mark_set)
ORDER BY at, rank, row_id;

CREATE TRIGGER trade_in_history AFTER INSERT ON trade
BEGIN INSERT INTO history (kind, row_id) VALUES ('trade', NEW.trade_id); END;
CREATE TRIGGER trade_cancel_in_history AFTER INSERT ON trade_cancel
BEGIN INSERT INTO history (kind, row_id) VALUES ('cancel', NEW.cancel_id); END;
CREATE TRIGGER mark_set_in_history AFTER INSERT ON mark_set
BEGIN INSERT INTO history (kind, row_id) VALUES ('mark_set', NEW.mark_set_id); END;
CREATE TRIGGER history_no_update BEFORE UPDATE ON history
BEGIN SELECT RAISE(ABORT, 'the store''s order of history is never changed'); END;
CREATE TRIGGER history_no_delete BEFORE DELETE ON history
BEGIN SELECT RAISE(ABORT, 'the store''s order of history is never deleted'); END;

-- A cancel can only be written once its trade is (the foreign key), so it follows the trade in
-- the store's order; comparing the two terminals' clocks refused good cancels when they differ.
DROP TRIGGER trade_cancel_after_booking;

-- The business date a close set closes: the desk-local date of its close, the same for every
-- correction of it. One close per date; a later one must be a correction naming it.
ALTER TABLE mark_set ADD COLUMN business_date TEXT
    CHECK (business_date IS NULL OR date(business_date, '+0 days') IS business_date);

-- Closes written before this section take the desk-local date of the close they stand for (the
-- original's time for a correction); desk_date() is the store's (blotter/store.py, desk time
-- zone). Earlier dates that hold several closes keep them all: they were written before the rule.
DROP TRIGGER mark_set_no_update;
WITH RECURSIVE root (id, root_at) AS (
    SELECT mark_set_id, marked_at FROM mark_set WHERE kind = 'close' AND corrects IS NULL
    UNION ALL
    SELECT m.mark_set_id, root.root_at FROM mark_set m JOIN root ON m.corrects = root.id)
UPDATE mark_set SET business_date = desk_date(
    (SELECT root_at FROM root WHERE root.id = mark_set.mark_set_id))
WHERE kind = 'close';
CREATE TRIGGER mark_set_no_update BEFORE UPDATE ON mark_set
BEGIN SELECT RAISE(ABORT, 'mark sets are never changed: commit a correcting set'); END;

CREATE INDEX mark_set_close_day ON mark_set (business_date) WHERE business_date IS NOT NULL;

CREATE TRIGGER mark_set_business_date BEFORE INSERT ON mark_set
WHEN (NEW.kind = 'close') IS NOT (NEW.business_date IS NOT NULL)
BEGIN SELECT RAISE(ABORT, 'a close set names its business date and an intraday set none'); END;

CREATE TRIGGER mark_set_one_close_a_day BEFORE INSERT ON mark_set
WHEN NEW.kind = 'close' AND NEW.corrects IS NULL AND EXISTS (
    SELECT 1 FROM mark_set WHERE kind = 'close' AND business_date = NEW.business_date)
BEGIN SELECT RAISE(ABORT, 'that business date has a close already: write a correction of it'); END;

CREATE TRIGGER mark_set_correction_same_day BEFORE INSERT ON mark_set
WHEN NEW.corrects IS NOT NULL
 AND NEW.business_date IS NOT (SELECT business_date FROM mark_set WHERE mark_set_id = NEW.corrects)
BEGIN SELECT RAISE(ABORT, 'a correction closes the business date of the close it corrects'); END;

-- @version 5 ------------------------------------------------------------------------------------

-- No row of history is replaced. INSERT OR REPLACE (and REPLACE INTO) deletes the rows a new row
-- collides with without firing DELETE triggers unless the connection sets recursive_triggers, so
-- each append-only table refuses an insert that collides with a row on its key or any unique
-- index. The store also turns recursive_triggers on, so its own connections fire the no-delete
-- triggers above as a second fence. (In a BEFORE INSERT trigger NEW holds the values after type
-- affinity, and an unassigned INTEGER PRIMARY KEY reads as -1, which no row holds.)
CREATE TRIGGER underlying_no_replace BEFORE INSERT ON underlying
WHEN EXISTS (SELECT 1 FROM underlying WHERE underlying_id = NEW.underlying_id)
  OR EXISTS (SELECT 1 FROM underlying WHERE symbol = NEW.symbol)
  OR (NEW.is_reference = 1 AND EXISTS (SELECT 1 FROM underlying WHERE is_reference = 1))
BEGIN SELECT RAISE(ABORT, 'underlyings are never replaced: one with this id, symbol or reference flag exists'); END;

CREATE TRIGGER contract_no_replace BEFORE INSERT ON contract
WHEN EXISTS (SELECT 1 FROM contract WHERE contract_id = NEW.contract_id)
  OR EXISTS (SELECT 1 FROM contract
             WHERE underlying_id = NEW.underlying_id AND option_type = NEW.option_type
               AND coalesce(expiry, '') = coalesce(NEW.expiry, '')
               AND coalesce(strike, 0) = coalesce(NEW.strike, 0) AND american = NEW.american
               AND multiplier = NEW.multiplier AND cash_settled = NEW.cash_settled)
BEGIN SELECT RAISE(ABORT, 'contracts are never replaced: one with this id or these terms exists'); END;

CREATE TRIGGER book_no_replace BEFORE INSERT ON book
WHEN EXISTS (SELECT 1 FROM book WHERE book_id = NEW.book_id)
  OR EXISTS (SELECT 1 FROM book WHERE name = NEW.name)
BEGIN SELECT RAISE(ABORT, 'books are never replaced: one with this id or name exists'); END;

CREATE TRIGGER trade_no_replace BEFORE INSERT ON trade
WHEN EXISTS (SELECT 1 FROM trade WHERE trade_id = NEW.trade_id)
  OR (NEW.replaces IS NOT NULL AND EXISTS (SELECT 1 FROM trade WHERE replaces = NEW.replaces))
BEGIN SELECT RAISE(ABORT, 'trades are never replaced: cancel or amend instead'); END;

CREATE TRIGGER trade_cancel_no_replace BEFORE INSERT ON trade_cancel
WHEN EXISTS (SELECT 1 FROM trade_cancel WHERE cancel_id = NEW.cancel_id)
  OR EXISTS (SELECT 1 FROM trade_cancel WHERE trade_id = NEW.trade_id)
BEGIN SELECT RAISE(ABORT, 'cancels are never replaced: this cancel or a cancel of this trade exists'); END;

CREATE TRIGGER mark_set_no_replace BEFORE INSERT ON mark_set
WHEN EXISTS (SELECT 1 FROM mark_set WHERE mark_set_id = NEW.mark_set_id)
  OR (NEW.corrects IS NOT NULL AND EXISTS (SELECT 1 FROM mark_set WHERE corrects = NEW.corrects))
BEGIN SELECT RAISE(ABORT, 'mark sets are never replaced: commit a correcting set'); END;

CREATE TRIGGER mark_no_replace BEFORE INSERT ON mark
WHEN EXISTS (SELECT 1 FROM mark WHERE mark_id = NEW.mark_id)
  OR EXISTS (SELECT 1 FROM mark WHERE mark_set_id = NEW.mark_set_id AND seq = NEW.seq)
  OR EXISTS (SELECT 1 FROM mark
             WHERE mark_set_id = NEW.mark_set_id AND kind = NEW.kind
               AND coalesce(underlying_id, 0) = coalesce(NEW.underlying_id, 0)
               AND coalesce(currency, '') = coalesce(NEW.currency, '')
               AND coalesce(expiry, '') = coalesce(NEW.expiry, '')
               AND coalesce(strike, 0) = coalesce(NEW.strike, 0)
               AND coalesce(tenor_days, 0) = coalesce(NEW.tenor_days, 0))
BEGIN SELECT RAISE(ABORT, 'marks are never replaced: log a new mark'); END;

CREATE TRIGGER desk_note_no_replace BEFORE INSERT ON desk_note
WHEN EXISTS (SELECT 1 FROM desk_note WHERE note_id = NEW.note_id)
BEGIN SELECT RAISE(ABORT, 'notes are never replaced'); END;

CREATE TRIGGER import_file_no_replace BEFORE INSERT ON import_file
WHEN EXISTS (SELECT 1 FROM import_file WHERE import_id = NEW.import_id)
  OR EXISTS (SELECT 1 FROM import_file WHERE kind = NEW.kind AND sha256 = NEW.sha256)
BEGIN SELECT RAISE(ABORT, 'import records are never replaced'); END;

CREATE TRIGGER history_no_replace BEFORE INSERT ON history
WHEN EXISTS (SELECT 1 FROM history WHERE seq = NEW.seq)
  OR EXISTS (SELECT 1 FROM history WHERE kind = NEW.kind AND row_id = NEW.row_id)
BEGIN SELECT RAISE(ABORT, 'the store''s order of history is never replaced'); END;

-- @version 6 ------------------------------------------------------------------------------------

-- The desk time zone the book's closes are dated in: one for the book's life, written when the
-- book is made (or by this upgrade) from the zone of the terminal doing it, never changed, so
-- terminals with different desk_tz settings date a close alike. desk_zone() is the store's
-- (blotter/store.py).
CREATE TABLE book_zone (
    only_row INTEGER PRIMARY KEY CHECK (only_row = 1),
    zone     TEXT    NOT NULL CHECK (length(zone) BETWEEN 1 AND 64)
) STRICT;
INSERT INTO book_zone (only_row, zone) VALUES (1, desk_zone());
CREATE TRIGGER book_zone_no_update BEFORE UPDATE ON book_zone
BEGIN SELECT RAISE(ABORT, 'the book''s desk zone is never changed'); END;
CREATE TRIGGER book_zone_no_delete BEFORE DELETE ON book_zone
BEGIN SELECT RAISE(ABORT, 'the book''s desk zone is never deleted'); END;
CREATE TRIGGER book_zone_no_replace BEFORE INSERT ON book_zone
WHEN EXISTS (SELECT 1 FROM book_zone)
BEGIN SELECT RAISE(ABORT, 'the book''s desk zone is never replaced'); END;

-- @version 7 ------------------------------------------------------------------------------------

-- When each mark point was observed: the instant its value was marked. A point logged, imported
-- or given in a set is observed when its set is marked; a close copies each point in force with
-- the time that point was last marked, so a close never re-dates a carried mark and staleness is
-- read per point. Points written before this section take their own set's time: for an old
-- close that is the close's time, the only time it kept of its points.
ALTER TABLE mark ADD COLUMN observed_at TEXT CHECK (observed_at IS NULL OR (
    observed_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
    AND datetime(substr(observed_at, 1, 19), '+0 days') IS replace(substr(observed_at, 1, 19), 'T', ' ')));
DROP TRIGGER mark_no_update;
UPDATE mark SET observed_at = (
    SELECT s.marked_at FROM mark_set s WHERE s.mark_set_id = mark.mark_set_id);
CREATE TRIGGER mark_no_update BEFORE UPDATE ON mark
BEGIN SELECT RAISE(ABORT, 'marks are never changed: log a new mark'); END;

CREATE TRIGGER mark_observed BEFORE INSERT ON mark
WHEN NEW.observed_at IS NULL
BEGIN SELECT RAISE(ABORT, 'a mark names when it was observed'); END;

-- @version 8 ------------------------------------------------------------------------------------

-- A correction of an underlying's reference data: the underlying row is never changed, so a
-- wrong description, contract multiplier default, beta, holiday calendar or price tick is put
-- right by a row here. A NULL field keeps the value in force; for each field the latest
-- correction that sets it wins (latest by correction_id, the order they were written in). The
-- tick is the price precision the app and the reports show prices to; none set: the kind's.
CREATE TABLE underlying_correction (
    correction_id INTEGER PRIMARY KEY,
    underlying_id INTEGER NOT NULL REFERENCES underlying (underlying_id),
    corrected_at  TEXT    NOT NULL CHECK (length(corrected_at) = 27),
    who           TEXT    NOT NULL CHECK (length(who) BETWEEN 1 AND 64),
    reason        TEXT    NOT NULL CHECK (length(reason) BETWEEN 1 AND 500),
    description   TEXT    CHECK (description IS NULL OR length(description) <= 200),
    multiplier    REAL    CHECK (multiplier IS NULL OR multiplier > 0),
    beta          REAL    CHECK (beta IS NULL OR beta BETWEEN -20 AND 20),
    calendar      TEXT    CHECK (calendar IS NULL OR length(calendar) BETWEEN 1 AND 32),
    tick          REAL    CHECK (tick IS NULL OR (tick > 0 AND tick <= 1000)),
    CHECK (description IS NOT NULL OR multiplier IS NOT NULL OR beta IS NOT NULL
           OR calendar IS NOT NULL OR tick IS NOT NULL)
) STRICT;
CREATE INDEX underlying_correction_by_underlying ON underlying_correction (underlying_id);
CREATE TRIGGER underlying_correction_no_update BEFORE UPDATE ON underlying_correction
BEGIN SELECT RAISE(ABORT, 'underlying corrections are never changed: record a new one'); END;
CREATE TRIGGER underlying_correction_no_delete BEFORE DELETE ON underlying_correction
BEGIN SELECT RAISE(ABORT, 'underlying corrections are never deleted: record a new one'); END;
CREATE TRIGGER underlying_correction_no_replace BEFORE INSERT ON underlying_correction
WHEN EXISTS (SELECT 1 FROM underlying_correction WHERE correction_id = NEW.correction_id)
BEGIN SELECT RAISE(ABORT, 'underlying corrections are never replaced: record a new one'); END;

-- @version 9 ------------------------------------------------------------------------------------

-- The book's base currency, which totals are converted to at the marked FX spots. Append-only:
-- a change is a new row, and the row with the highest id is in force. The first row is written
-- with the book (or by this upgrade, which gives an older book USD) and carries no time or who;
-- base_currency_default() is the store's (blotter/store/db.py): USD, or the currency
-- `blotter create --base-currency` names.
CREATE TABLE base_currency (
    base_id  INTEGER PRIMARY KEY,
    currency TEXT    NOT NULL CHECK (length(currency) = 3 AND currency GLOB '[A-Z][A-Z][A-Z]'),
    set_at   TEXT    CHECK (
        set_at GLOB '[0-9][0-9][0-9][0-9]-[0-9][0-9]-[0-9][0-9]T[0-9][0-9]:[0-9][0-9]:[0-9][0-9].[0-9][0-9][0-9][0-9][0-9][0-9]Z'
        AND datetime(substr(set_at, 1, 19), '+0 days') IS replace(substr(set_at, 1, 19), 'T', ' ')),
    who      TEXT    CHECK (length(who) > 0),
    CHECK ((set_at IS NULL) = (who IS NULL)),
    CHECK ((base_id = 1) = (set_at IS NULL))
) STRICT;
INSERT INTO base_currency (base_id, currency) VALUES (1, base_currency_default());
CREATE TRIGGER base_currency_no_update BEFORE UPDATE ON base_currency
BEGIN SELECT RAISE(ABORT, 'the base currency is never changed in place: record a new one'); END;
CREATE TRIGGER base_currency_no_delete BEFORE DELETE ON base_currency
BEGIN SELECT RAISE(ABORT, 'base currency rows are never deleted: record a new one'); END;
CREATE TRIGGER base_currency_no_replace BEFORE INSERT ON base_currency
WHEN EXISTS (SELECT 1 FROM base_currency WHERE base_id = NEW.base_id)
BEGIN SELECT RAISE(ABORT, 'base currency rows are never replaced: record a new one'); END;
