using Bitbudget.Service.Auth;
using Bitbudget.Service.Hosting;
using Microsoft.Extensions.Configuration;
using Microsoft.Extensions.Logging.Abstractions;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Tests.Auth;

public sealed class ApiKeyRingTests : IDisposable
{
    private readonly string folder = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));

    [Fact]
    public void WithoutConfiguredKeysTheFirstStartWritesAPrivateKeyFile()
    {
        var ring = Ring(new Dictionary<string, string?>());

        var path = Path.Combine(folder, "api-key");
        var key = File.ReadAllText(path).Trim();
        Assert.True(key.Length >= 32);
        Assert.True(ring.Accepts(key));
        Assert.False(ring.Accepts(key + "x"));
        if (!OperatingSystem.IsWindows())
        {
            Assert.Equal(UnixFileMode.UserRead | UnixFileMode.UserWrite, File.GetUnixFileMode(path));
        }
    }

    [Fact]
    public void ASecondStartReusesTheKeyFile()
    {
        Ring(new Dictionary<string, string?>());
        var key = File.ReadAllText(Path.Combine(folder, "api-key")).Trim();

        var again = Ring(new Dictionary<string, string?>());

        Assert.Equal(key, File.ReadAllText(Path.Combine(folder, "api-key")).Trim());
        Assert.True(again.Accepts(key));
    }

    [Fact]
    public void KeysFromTheEnvironmentVariableAndSettingsAreAllAccepted()
    {
        var ring = Ring(new Dictionary<string, string?> { ["BITBUDGET_API_KEYS"] = " alpha , beta,", ["Bitbudget:ApiKeys:0"] = "gamma" });

        Assert.True(ring.Accepts("alpha"));
        Assert.True(ring.Accepts("beta"));
        Assert.True(ring.Accepts("gamma"));
        Assert.False(ring.Accepts("delta"));
        Assert.False(ring.Accepts(""));
        Assert.False(ring.Accepts("alpha,beta"));
        Assert.False(File.Exists(Path.Combine(folder, "api-key")));
    }

    public void Dispose()
    {
        if (Directory.Exists(folder))
        {
            Directory.Delete(folder, recursive: true);
        }
    }

    private ApiKeyRing Ring(Dictionary<string, string?> settings)
    {
        var configuration = new ConfigurationBuilder().AddInMemoryCollection(settings).Build();
        var options = new BitbudgetOptions { DataFolder = folder };
        configuration.GetSection(BitbudgetOptions.Section).Bind(options);
        return new ApiKeyRing(Options.Create(options), configuration, NullLogger<ApiKeyRing>.Instance);
    }
}
