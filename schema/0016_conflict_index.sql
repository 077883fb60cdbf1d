-- 0016: the status count of conflicting values reads only the cycles that have any (a
-- partial index), not every cycle of the store.
CREATE INDEX cycles_conflicting ON cycles(conflicts) WHERE conflicts > 0;
