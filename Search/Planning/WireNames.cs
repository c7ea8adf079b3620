using System.Text;
using System.Text.Json;
using System.Text.Json.Serialization;

namespace Bitbudget.Search.Planning;

/// <summary>
/// The spelling of setting values outside the engine (manifest, command line, HTTP): enum names in
/// kebab case, e.g. PerChannel as "per-channel", MseOptimal as "mse-optimal".
/// </summary>
public static class WireNames
{
    public static string Format<T>(T value)
        where T : struct, Enum
    {
        var name = value.ToString();
        var text = new StringBuilder(name.Length + 4);
        for (var i = 0; i < name.Length; i++)
        {
            if (i > 0 && char.IsUpper(name[i]))
            {
                text.Append('-');
            }

            text.Append(char.ToLowerInvariant(name[i]));
        }

        return text.ToString();
    }

    public static bool TryParse<T>(string text, out T value)
        where T : struct, Enum
    {
        foreach (var candidate in Enum.GetValues<T>())
        {
            if (string.Equals(Format(candidate), text.Trim(), StringComparison.OrdinalIgnoreCase))
            {
                value = candidate;
                return true;
            }
        }

        value = default;
        return false;
    }

    /// <summary>
    /// Writes enums in JSON in the same spelling (a trial's assignment: "per-channel", "min-max"), so the store,
    /// the API and trials.json need no copy of the names; reads them back in any case.
    /// </summary>
    public static JsonConverter JsonConverter { get; } = new JsonStringEnumConverter(JsonNamingPolicy.KebabCaseLower, allowIntegerValues: false);

    /// <summary>Every accepted spelling, for error messages.</summary>
    public static string Choices<T>()
        where T : struct, Enum => string.Join(", ", Enum.GetValues<T>().Select(v => Format(v)));
}
