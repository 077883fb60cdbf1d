-- The chain's keyed rule: from which event on links are HMAC-SHA-256 under the chain key
-- (kept outside the database). switch_seq is the `chain-keyed` event that recorded the
-- switch, or 0 when the chain was keyed from its first event; key_proof shows the switch
-- was made by a holder of the key. One row at most; none while the chain is plain.
CREATE TABLE chain_keying (
    id         INTEGER PRIMARY KEY CHECK (id = 1),
    switch_seq INTEGER NOT NULL CHECK (switch_seq >= 0),
    key_proof  TEXT    NOT NULL
) STRICT;
