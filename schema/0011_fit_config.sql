-- 0011: each stored fit records a fingerprint of the configuration it was computed under
-- (chemistry, fitting, economics, lead times, time zone), so `verify` can recompute a fit
-- and tell an edited row from one computed under settings changed since. NULL for rows
-- stored before.
ALTER TABLE fits ADD COLUMN config_sha256 TEXT;
