using System.ComponentModel.DataAnnotations;
using System.Globalization;
using System.Reflection;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Hosting;

/// <summary>
/// Checks every setting against its [Range]/[Required] attribute and says, one line per bad setting, its
/// full configuration key, the allowed range and the value it got ("Bitbudget:RecoveryIntervalSeconds must
/// lie between 5 and 3600; got 2.").
/// </summary>
/// <remarks>The API key file's permissions are checked here too, so a shared key file stops start-up before anything runs.</remarks>
internal sealed class BitbudgetOptionsValidator(IConfiguration configuration) : IValidateOptions<BitbudgetOptions>
{
    public ValidateOptionsResult Validate(string? name, BitbudgetOptions options)
    {
        ArgumentNullException.ThrowIfNull(options);
        var failures = new List<string>();
        foreach (var property in typeof(BitbudgetOptions).GetProperties(BindingFlags.Public | BindingFlags.Instance).Where(p => p.CanWrite))
        {
            var key = $"{BitbudgetOptions.Section}:{property.Name}";
            var value = property.GetValue(options);
            if (property.GetCustomAttribute<RequiredAttribute>() is not null && (value is null || value is string { Length: 0 }))
            {
                failures.Add($"{key} is required.");
            }

            if (property.GetCustomAttribute<RangeAttribute>() is { } range && !range.IsValid(value))
            {
                failures.Add(string.Create(CultureInfo.InvariantCulture, $"{key} must lie between {range.Minimum} and {range.Maximum}; got {value}."));
            }
        }

        if (options.Store is not (StoreKinds.Sqlite or StoreKinds.Postgres))
        {
            failures.Add($"{BitbudgetOptions.Section}:Store must be '{StoreKinds.Sqlite}' or '{StoreKinds.Postgres}'; got '{options.Store}'.");
        }
        else if (options.Store == StoreKinds.Postgres && string.IsNullOrWhiteSpace(options.ConnectionString))
        {
            failures.Add($"{BitbudgetOptions.Section}:ConnectionString is required when {BitbudgetOptions.Section}:Store is '{StoreKinds.Postgres}' (e.g. Host=db;Username=bitbudget;Password=...;Database=bitbudget).");
        }

        if (options.Role is not (Roles.All or Roles.Api or Roles.Worker))
        {
            failures.Add($"{BitbudgetOptions.Section}:Role must be '{Roles.All}', '{Roles.Api}' or '{Roles.Worker}'; got '{options.Role}'.");
        }

        if (failures.Count == 0 && Auth.ApiKeyRing.UsesKeyFile(options, configuration)
            && Auth.ApiKeyRing.SharedKeyFileProblem(Path.Combine(options.DataPath, Auth.ApiKeyRing.KeyFileName)) is { } keyFile)
        {
            failures.Add(keyFile);
        }

        return failures.Count == 0 ? ValidateOptionsResult.Success : ValidateOptionsResult.Fail(failures);
    }
}
