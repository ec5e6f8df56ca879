ALTER TABLE fits ALTER COLUMN document SET COMPRESSION default;
ALTER TABLE fit_curves ALTER COLUMN x SET COMPRESSION default,
                       ALTER COLUMN fit SET COMPRESSION default,
                       ALTER COLUMN se SET COMPRESSION default;
