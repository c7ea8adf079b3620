using System.Text.Json;
using System.Text.Json.Serialization;

namespace Bitbudget.Search.Manifest;

/// <summary>The one JSON form of the manifest and the frontier: camelCase, indented, UTF-8.</summary>
public static class ManifestJson
{
    /// <summary>Options every artifact is written with.</summary>
    public static JsonSerializerOptions Options { get; } = new(JsonSerializerDefaults.Web)
    {
        WriteIndented = true,
        DefaultIgnoreCondition = JsonIgnoreCondition.Never,
        NumberHandling = JsonNumberHandling.Strict,
    };

    public static byte[] Serialize<T>(T value) => JsonSerializer.SerializeToUtf8Bytes(value, Options);

    public static AssignmentManifest Deserialize(ReadOnlySpan<byte> json) =>
        JsonSerializer.Deserialize<AssignmentManifest>(json, Options)
        ?? throw new JsonException("The manifest is empty.");
}
