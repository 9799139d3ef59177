-- reason_codes: the quarantine reasons' stable codes, one row per reason
-- (reason = the sentence the steps write, code = its short stable name). The one
-- table of reasons lives in retain/data/reasons.py; prepare.py binds it here.
-- Parameters: $reason_sentences, $reason_codes (lists of the same length).
with pairs as (
    select
        unnest(cast($reason_sentences as varchar[])) as reason,
        unnest(cast($reason_codes as varchar[])) as code
),

final as (
    select cast(reason as varchar) as reason, cast(code as varchar) as code
    from pairs
)

select * from final
