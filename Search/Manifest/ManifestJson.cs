using System.Text.Json;
using System.Text.Json.Serialization;

namespace Bitbudget.Search.Manifest;

/// <summary>
/// The one JSON form of the manifest, the frontier and the CLI's trials.json: camelCase, indented, UTF-8.
/// JSON has no infinity or NaN, so they are written as the strings "Infinity", "-Infinity" and "NaN",
/// the same form the API and the store use; null always means absent, never infinite.
/// </summary>
public static class ManifestJson
{
    /// <summary>Options every artifact is written with.</summary>
    public static JsonSerializerOptions Options { get; } = new(JsonSerializerDefaults.Web)
    {
        WriteIndented = true,
        DefaultIgnoreCondition = JsonIgnoreCondition.Never,
        NumberHandling = JsonNumberHandling.AllowNamedFloatingPointLiterals,
        Converters = { Planning.WireNames.JsonConverter },
    };

    public static byte[] Serialize<T>(T value) => JsonSerializer.SerializeToUtf8Bytes(value, Options);

    public static AssignmentManifest Deserialize(ReadOnlySpan<byte> json) =>
        JsonSerializer.Deserialize<AssignmentManifest>(json, Options)
        ?? throw new JsonException("The manifest is empty.");
}
