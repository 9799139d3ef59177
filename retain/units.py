"""Time units shared by every stage. Tenure is measured in days."""

DAYS_PER_YEAR = 365.25
DAYS_PER_MONTH = DAYS_PER_YEAR / 12.0  # 30.4375: a "month" of tenure
