using System.Text.Json;
using System.Text.Json.Serialization;

namespace Bitbudget.Service.Store;

/// <summary>JSON settings for what the store keeps in text columns; SQNR of identical outputs is +infinity.</summary>
internal static class StoreJson
{
    public static JsonSerializerOptions Options { get; } = new(JsonSerializerDefaults.Web)
    {
        NumberHandling = JsonNumberHandling.AllowNamedFloatingPointLiterals,
        Converters = { Bitbudget.Search.Planning.WireNames.JsonConverter },
    };

    public static string Write<T>(T value) => JsonSerializer.Serialize(value, Options);

    public static T Read<T>(string json) =>
        JsonSerializer.Deserialize<T>(json, Options) ?? throw new InvalidDataException($"Stored JSON for {typeof(T).Name} is empty.");
}
