using System.Diagnostics;
using System.Text.Json;
using Bitbudget.Service.Hosting;

namespace Bitbudget.Service.Tests.Deploy;

/// <summary>
/// deploy/compose.yaml cannot be run here (no container engine), so it is read with an outside YAML parser
/// (PyYAML, Debian's python3-yaml, which also resolves the file's anchors and merge keys) and checked against
/// the service's own settings: every Bitbudget__ variable names a real setting, the roles are ones the service
/// takes, workers publish no port (so --scale worker=N works), and every process shares the blob volume.
/// </summary>
public sealed class ComposeFileTests
{
    private static readonly Lazy<JsonElement> Compose = new(Load);

    private static JsonElement Services => Compose.Value.GetProperty("services");

    [Fact]
    public void EveryBitbudgetVariableNamesASettingOfTheService()
    {
        var settings = typeof(BitbudgetOptions).GetProperties().Select(p => p.Name).ToHashSet(StringComparer.Ordinal);
        var variables = Services.EnumerateObject()
            .Where(s => s.Value.TryGetProperty("environment", out _))
            .SelectMany(s => s.Value.GetProperty("environment").EnumerateObject())
            .Select(e => e.Name)
            .Where(n => n.StartsWith("Bitbudget__", StringComparison.Ordinal))
            .ToList();

        Assert.NotEmpty(variables);
        Assert.All(variables, v => Assert.Contains(v["Bitbudget__".Length..], settings));
    }

    [Fact]
    public void OneApiAndScalableWorkersOnTheSharedDatabaseAndBlobVolume()
    {
        var api = Services.GetProperty("api");
        var worker = Services.GetProperty("worker");

        Assert.Equal(Roles.Api, Env(api, "Role"));
        Assert.Equal(Roles.Worker, Env(worker, "Role"));
        Assert.False(worker.TryGetProperty("ports", out _), "A worker that publishes a host port cannot be scaled past one.");
        foreach (var service in new[] { api, worker })
        {
            Assert.Equal(StoreKinds.Postgres, Env(service, "Store"));
            Assert.Contains("Host=db;", Env(service, "ConnectionString"), StringComparison.Ordinal);
            Assert.Contains($"blobs:{Env(service, "BlobFolder")}", service.GetProperty("volumes").EnumerateArray().Select(v => v.GetString()));
            Assert.Equal("service_healthy", service.GetProperty("depends_on").GetProperty("db").GetProperty("condition").GetString());
            Assert.Contains("/healthz", service.GetProperty("healthcheck").GetProperty("test").ToString(), StringComparison.Ordinal);
        }

        Assert.Contains("pg_isready", Services.GetProperty("db").GetProperty("healthcheck").GetProperty("test").ToString(), StringComparison.Ordinal);
        Assert.True(Compose.Value.GetProperty("volumes").TryGetProperty("blobs", out _));
    }

    private static string Env(JsonElement service, string setting) =>
        service.GetProperty("environment").GetProperty("Bitbudget__" + setting).GetString()!;

    private static JsonElement Load()
    {
        var folder = new DirectoryInfo(AppContext.BaseDirectory);
        while (folder is not null && !File.Exists(Path.Combine(folder.FullName, "Search.sln")))
        {
            folder = folder.Parent;
        }

        var file = Path.Combine(folder!.FullName, "deploy", "compose.yaml");
        var start = new ProcessStartInfo("/usr/bin/python3", ["-c", "import json, sys, yaml; print(json.dumps(yaml.safe_load(open(sys.argv[1]))))", file])
        {
            RedirectStandardOutput = true,
            RedirectStandardError = true,
            UseShellExecute = false,
        };
        using var python = Process.Start(start)!;
        var output = python.StandardOutput.ReadToEnd();
        var error = python.StandardError.ReadToEnd();
        python.WaitForExit();
        Assert.True(python.ExitCode == 0, $"PyYAML could not read {file}: {error}");
        return JsonDocument.Parse(output).RootElement.Clone();
    }
}
