-- 0008: the water content of a lot's catalyst as charged (wt %), for catalysts charged
-- water-wet with the loading stated on the dry mass. NULL: charged dry, or not stated.
-- Registrations written before keep verifying: the field is absent from their events and
-- NULL here.
ALTER TABLE lots ADD COLUMN water_content_wt_pct REAL
    CHECK (water_content_wt_pct IS NULL OR (water_content_wt_pct >= 0 AND water_content_wt_pct < 100));
