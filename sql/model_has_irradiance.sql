-- Whether any irradiance reading (GHI or plane of array) is stored for the site.
SELECT EXISTS (
    SELECT 1 FROM readings WHERE device = 'site' AND quantity IN ('ghi_wm2', 'poa_wm2')
);
