-- The family of each identified model and its own parameters, as JSON (`{"family":
-- "second_order", "first_time_constant_s": …}`); the gain, time constant and dead time columns
-- keep the first-order equivalent that trends and plots read. NULL for models stored before
-- families were identified: those were first order.
ALTER TABLE models ADD COLUMN family TEXT;
