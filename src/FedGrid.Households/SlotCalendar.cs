namespace FedGrid.Households;

/// <summary>
/// The simulation clock: time advances in 15-minute slots, slot 0 starting at midnight of
/// <see cref="FirstDay"/>. Slots are counted from the start of the horizon.
/// </summary>
/// <param name="FirstDay">Day of the week of slot 0.</param>
public sealed record SlotCalendar(DayOfWeek FirstDay = DayOfWeek.Monday)
{
    /// <summary>Slots in one day (96 quarter hours).</summary>
    public const int SlotsPerDay = 96;

    /// <summary>Length of one slot in hours (0.25 h): energy in kWh = power in kW × this.</summary>
    public const double SlotHours = 0.25;

    /// <summary>Day index (0 = first day) of a slot.</summary>
    public static int DayOf(int slot) => slot / SlotsPerDay;

    /// <summary>Slot within its day, 0..95.</summary>
    public static int SlotOfDay(int slot) => slot % SlotsPerDay;

    /// <summary>Hour of day at the start of the slot (0, 0.25, ..., 23.75).</summary>
    public static double HourOfDay(int slot) => SlotOfDay(slot) * SlotHours;

    /// <summary>Day of the week of a slot.</summary>
    public DayOfWeek DayOfWeekOf(int slot) => (DayOfWeek)(((int)FirstDay + DayOf(slot)) % 7);

    /// <summary>Whether the slot falls on a Saturday or Sunday.</summary>
    public bool IsWeekend(int slot) => DayOfWeekOf(slot) is DayOfWeek.Saturday or DayOfWeek.Sunday;

    /// <summary>Converts a clock time "HH:MM" (quarter hours; "24:00" allowed) to a slot of day.</summary>
    /// <exception cref="FormatException">Not a quarter-hour clock time.</exception>
    public static int ParseClock(string text)
    {
        ArgumentNullException.ThrowIfNull(text);
        if (text.Length == 5 && text[2] == ':' && int.TryParse(text.AsSpan(0, 2), System.Globalization.NumberStyles.None, null, out int h)
            && int.TryParse(text.AsSpan(3, 2), System.Globalization.NumberStyles.None, null, out int m)
            && m % 15 == 0 && m < 60 && (h < 24 || (h == 24 && m == 0)))
            return h * 4 + m / 15;
        throw new FormatException($"'{text}' is not a quarter-hour clock time HH:MM (00:00 to 24:00, minutes 00, 15, 30 or 45)");
    }

    /// <summary>Formats a slot of day (0..96) as "HH:MM".</summary>
    public static string FormatClock(int slotOfDay) => $"{slotOfDay / 4:00}:{slotOfDay % 4 * 15:00}";
}
