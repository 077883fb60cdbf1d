-- 0015: large exports stored in parts. A file of many rows keeps its values in a run of
-- `file-rows` events (a few thousand rows each, so that no payload grows with the file),
-- followed by its `file-ingested` event; the measurements view reads both kinds.
DROP VIEW measurements;
CREATE VIEW measurements AS
    SELECT
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[0]')
                ELSE json_extract(m.value, '$.id') END AS id,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[1]')
                ELSE json_extract(m.value, '$.batch_id') END AS batch_id,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[2]')
                ELSE json_extract(m.value, '$.quantity') END AS quantity,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[3]')
                ELSE json_extract(m.value, '$.value') END AS value,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[4]')
                ELSE json_extract(m.value, '$.text') END AS text,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[5]')
                ELSE json_extract(m.value, '$.kind') END AS kind,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[6]')
                ELSE json_extract(m.value, '$.source_file_id') END AS source_file_id,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[7]')
                ELSE json_extract(m.value, '$.line') END AS line,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[8]')
                ELSE json_extract(m.value, '$.col') END AS col,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[9]')
                ELSE json_extract(m.value, '$.raw') END AS raw,
           e.seq AS event_seq
    FROM events e, json_each(e.payload, '$.measurements') m
    WHERE e.kind = 'file-ingested' OR e.kind = 'file-rows'
    UNION ALL
    SELECT json_extract(e.payload, '$.measurement.id'),
           json_extract(e.payload, '$.measurement.batch_id'),
           json_extract(e.payload, '$.measurement.quantity'),
           json_extract(e.payload, '$.measurement.value'),
           json_extract(e.payload, '$.measurement.text'),
           json_extract(e.payload, '$.measurement.kind'),
           json_extract(e.payload, '$.measurement.source_file_id'),
           json_extract(e.payload, '$.measurement.line'),
           json_extract(e.payload, '$.measurement.col'),
           json_extract(e.payload, '$.measurement.raw'),
           e.seq
    FROM events e
    WHERE e.kind = 'correction';
