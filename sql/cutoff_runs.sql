-- The run of cutoffs whose window holds a day, as used by takeup_history.sql (breadth windows)
-- and reach_at_cutoffs.sql (the rules' lookback windows): cutoff k (from 0) lies k steps of
-- {step} days before a reference day and its window is the {days} days before it, so a day {age}
-- days before the reference day (age >= 1) lies in cutoff k's window exactly when
-- k * step < age <= k * step + days. The cutoffs that hold the day are then k_lo .. k_hi (none
-- when k_lo > k_hi), at most {last}; as bits of one 64-bit mask, bit k set for each.
-- part: k_lo
CASE WHEN {age} <= {days} THEN 0
                ELSE CAST(FLOOR(({age} - {days} + {step} - 1) * 1.0 / {step}) AS INTEGER)
           END
-- part: k_hi
LEAST({last}, CAST(FLOOR(({age} - 1) * 1.0 / {step}) AS INTEGER))
-- part: mask
(CAST(1 AS BIGINT) << (k_hi + 1)) - (CAST(1 AS BIGINT) << k_lo)
