-- 0009: a lot's family. Lots of one family (or, without one, of one catalyst description)
-- form a population: the earlier lots' fits give a young lot an empirical-Bayes prior.
-- Optional; absent from the event payloads that do not give it, so they keep verifying.
ALTER TABLE lots ADD COLUMN family TEXT;
