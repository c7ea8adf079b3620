using System.Security.Cryptography;
using System.Text;
using Bitbudget.Service.Hosting;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Auth;

/// <summary>
/// The accepted API keys, held only as SHA-256 hashes. Keys come from BITBUDGET_API_KEYS (comma-separated)
/// and Bitbudget:ApiKeys; with none configured, a key is generated once and kept in &lt;data&gt;/api-key.
/// </summary>
internal sealed partial class ApiKeyRing
{
    public const string EnvironmentVariable = "BITBUDGET_API_KEYS";
    public const string KeyFileName = "api-key";

    private readonly List<byte[]> hashes;

    public ApiKeyRing(IOptions<BitbudgetOptions> options, IConfiguration configuration, ILogger<ApiKeyRing> logger)
    {
        var keys = (configuration[EnvironmentVariable] ?? "")
            .Split(',', StringSplitOptions.RemoveEmptyEntries | StringSplitOptions.TrimEntries)
            .Concat(options.Value.ApiKeys.Select(k => k.Trim()).Where(k => k.Length > 0))
            .ToList();
        if (keys.Count == 0)
        {
            keys.Add(LoadOrCreateKeyFile(Path.Combine(options.Value.DataPath, KeyFileName), logger));
        }

        hashes = keys.Distinct(StringComparer.Ordinal).Select(Hash).ToList();
    }

    /// <summary>True when the presented key is one of the accepted keys; the comparison takes the same time for every key.</summary>
    public bool Accepts(string presented)
    {
        var candidate = Hash(presented);
        var match = false;
        foreach (var hash in hashes)
        {
            match |= CryptographicOperations.FixedTimeEquals(candidate, hash);
        }

        return match;
    }

    /// <summary>Whether the service would read its key from the file in the data folder (no key configured).</summary>
    public static bool UsesKeyFile(BitbudgetOptions options, IConfiguration configuration) =>
        string.IsNullOrWhiteSpace(configuration[EnvironmentVariable]) && options.ApiKeys.All(string.IsNullOrWhiteSpace);

    /// <summary>One line saying how to fix a key file that other users can read or change; null when it is private or absent.</summary>
    public static string? SharedKeyFileProblem(string path) =>
        !OperatingSystem.IsWindows() && File.Exists(path) && (File.GetUnixFileMode(path) & Store.DataFolder.SharedBits) != 0
            ? $"The API key file {path} can be read or changed by other users (mode {Convert.ToString((int)File.GetUnixFileMode(path), 8)}); make it private with: chmod 600 {path}"
            : null;

    private static byte[] Hash(string key) => SHA256.HashData(Encoding.UTF8.GetBytes(key));

    private static string LoadOrCreateKeyFile(string path, ILogger logger)
    {
        if (File.Exists(path))
        {
            if (SharedKeyFileProblem(path) is { } problem)
            {
                throw new Hosting.StartupRefusedException(problem);
            }

            var existing = File.ReadAllText(path).Trim();
            if (existing.Length > 0)
            {
                LogKeyFileUsed(logger, path);
                return existing;
            }
        }

        Directory.CreateDirectory(Path.GetDirectoryName(path)!);
        var key = "bb_" + Convert.ToHexStringLower(RandomNumberGenerator.GetBytes(32));
        var temp = path + ".part";
        using (var stream = new FileStream(temp, FileMode.Create, FileAccess.Write, FileShare.None))
        {
            if (!OperatingSystem.IsWindows())
            {
                File.SetUnixFileMode(temp, UnixFileMode.UserRead | UnixFileMode.UserWrite);
            }

            stream.Write(Encoding.UTF8.GetBytes(key + "\n"));
            stream.Flush(flushToDisk: true);
        }

        File.Move(temp, path, overwrite: true);
        LogKeyCreated(logger, path);
        return key;
    }

    [LoggerMessage(EventId = 1100, Level = LogLevel.Warning, Message = "No API key was configured; generated one and wrote it to {KeyPath} (readable by this user only)")]
    private static partial void LogKeyCreated(ILogger logger, string keyPath);

    [LoggerMessage(EventId = 1101, Level = LogLevel.Information, Message = "Using the API key kept in {KeyPath}")]
    private static partial void LogKeyFileUsed(ILogger logger, string keyPath);
}
