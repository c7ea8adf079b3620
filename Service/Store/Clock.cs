using System.Globalization;

namespace Bitbudget.Service.Store;

/// <summary>Timestamps as the store keeps them: UTC, round-trip format, so text order is time order.</summary>
internal static class Clock
{
    public static string Format(DateTimeOffset value) => value.UtcDateTime.ToString("yyyy-MM-dd'T'HH:mm:ss.fffffff'Z'", CultureInfo.InvariantCulture);

    public static DateTimeOffset Parse(string value) => DateTimeOffset.Parse(value, CultureInfo.InvariantCulture, DateTimeStyles.AssumeUniversal | DateTimeStyles.AdjustToUniversal);

    public static DateTimeOffset? ParseOrNull(string? value) => value is null ? null : Parse(value);
}
