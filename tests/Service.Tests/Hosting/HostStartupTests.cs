using System.Net;
using Bitbudget.Service.Hosting;
using Bitbudget.Service.Store;
using Bitbudget.Service.Tests.Support;
using Microsoft.Extensions.DependencyInjection;
using Microsoft.Extensions.Logging;
using Microsoft.Extensions.Options;

namespace Bitbudget.Service.Tests.Hosting;

/// <summary>How the host starts with settings other than the test defaults; each test owns its host.</summary>
public sealed class HostStartupTests
{
    [Fact]
    public async Task WithoutConfiguredKeysTheGeneratedKeyFileOpensTheApi()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: false);
        using var anonymous = factory.CreateClient();
        await (await anonymous.GetAsync("/v1/models")).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");

        var key = (await File.ReadAllTextAsync(Path.Combine(factory.DataFolder, "api-key"))).Trim();
        using var client = factory.CreateAuthorizedClient(key);

        Assert.Equal(HttpStatusCode.OK, (await client.GetAsync("/v1/models")).StatusCode);
        var logs = string.Concat(Directory.GetFiles(Path.Combine(factory.DataFolder, "logs")).Select(ReadShared));
        Assert.Contains(Path.Combine(factory.DataFolder, "api-key"), logs, StringComparison.Ordinal);
        Assert.DoesNotContain(key, logs, StringComparison.Ordinal);
    }

    [Fact]
    public void EachHostLogsToItsOwnFolderWhileOtherHostsInTheProcessStartAndStop()
    {
        // Test hosts run side by side in one process. A host that wrote through the process-wide Serilog logger lost
        // its lines to whichever host was built last, and to nothing once that host was disposed; this is the order
        // that showed it (the key-file test above read its log while another test's host came and went).
        using var first = new ServiceFactory(workers: 0, configureKey: true);
        using var firstClient = first.CreateClient();
        using (var second = new ServiceFactory(workers: 0, configureKey: true))
        {
            using var secondClient = second.CreateClient();
        }

        var marker = "marker-" + Guid.NewGuid().ToString("N");
        var logger = first.Services.GetRequiredService<ILoggerFactory>().CreateLogger("HostStartupTests");
#pragma warning disable CA1848, CA2254 // a one-off line in a test, not a hot path
        logger.LogWarning(marker);
#pragma warning restore CA1848, CA2254

        var logs = string.Concat(Directory.GetFiles(Path.Combine(first.DataFolder, "logs")).Select(ReadShared));
        Assert.Contains(marker, logs, StringComparison.Ordinal);
    }

    [Fact]
    public async Task DashboardIsOffByDefault()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true);
        await (await factory.CreateAuthorizedClient().GetAsync("/jobs")).AssertProblemAsync(HttpStatusCode.NotFound, "not-found");
    }

    [Fact]
    public async Task EnabledDashboardNeedsTheApiKey()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true, new Dictionary<string, string> { ["Bitbudget:Dashboard"] = "true" });

        await (await factory.CreateClient().GetAsync("/jobs")).AssertProblemAsync(HttpStatusCode.Unauthorized, "unauthorized");
        var page = await factory.CreateAuthorizedClient().GetAsync("/jobs");

        Assert.Equal(HttpStatusCode.OK, page.StatusCode);
        Assert.Contains("Hangfire", await page.Content.ReadAsStringAsync(), StringComparison.Ordinal);
    }

    [Fact]
    public void InvalidSettingsStopTheHostAtStart()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true, new Dictionary<string, string> { ["Bitbudget:QueuePollIntervalMs"] = "5" });

        var error = Assert.Throws<OptionsValidationException>(() => factory.CreateClient());

        Assert.Contains("QueuePollIntervalMs", error.Message, StringComparison.Ordinal);
    }

    [Fact]
    [System.Runtime.Versioning.UnsupportedOSPlatform("windows")]
    public void AnApiKeyFileOthersCanReadIsRefusedWithTheCommandThatFixesIt()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: false);
        var keyFile = Path.Combine(factory.DataFolder, "api-key");
        File.WriteAllText(keyFile, "bb_shared_key\n");
        File.SetUnixFileMode(keyFile, UnixFileMode.UserRead | UnixFileMode.UserWrite | UnixFileMode.GroupRead | UnixFileMode.OtherRead);

        var error = Assert.Throws<OptionsValidationException>(() => factory.CreateClient());

        var line = Assert.Single(error.Failures);
        Assert.Contains($"chmod 600 {keyFile}", line, StringComparison.Ordinal);
        Assert.Contains("mode 644", line, StringComparison.Ordinal);
        Assert.DoesNotContain('\n', line);
    }

    [Fact]
    [System.Runtime.Versioning.UnsupportedOSPlatform("windows")]
    public async Task TheDataFolderAndEverythingInItAreReadableByTheServicesUserOnly()
    {
        var root = Path.Combine(Path.GetTempPath(), "bitbudget-tests", Guid.NewGuid().ToString("N"));
        var data = Path.Combine(root, "data");
        try
        {
            using (var factory = new ServiceFactory(workers: 1, configureKey: false, new Dictionary<string, string> { ["Bitbudget:DataFolder"] = data }))
            {
                using var anonymous = factory.CreateClient();
                var key = (await File.ReadAllTextAsync(Path.Combine(data, "api-key"))).Trim();
                using var client = factory.CreateAuthorizedClient(key);
                var (modelId, datasetId) = await client.UploadAsync("private");
                var id = (await client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast = 20 } })).GetProperty("id").GetString()!;
                await client.WaitForStateAsync(id, "succeeded");
            }

            Assert.Equal(UnixFileMode.UserRead | UnixFileMode.UserWrite | UnixFileMode.UserExecute, File.GetUnixFileMode(data));
            var entries = Directory.GetFileSystemEntries(data, "*", SearchOption.AllDirectories);
            // The store, its -wal/-shm, the job queue, the key, the logs and the blobs of the model, dataset and artifacts.
            Assert.Contains(entries, e => e.EndsWith("bitbudget.db", StringComparison.Ordinal));
            Assert.Contains(entries, e => e.EndsWith("jobs.db", StringComparison.Ordinal));
            Assert.Contains(entries, e => e.Contains(Path.Combine(data, "logs"), StringComparison.Ordinal));
            Assert.True(entries.Count(e => e.Contains(Path.Combine(data, "blobs"), StringComparison.Ordinal)) >= 6);
            // SQLite may still remove a -wal/-shm file as the job queue's last connection closes after the host has
            // gone; a file that is gone exposes nothing, so only files that still exist are checked.
            foreach (var entry in entries)
            {
                UnixFileMode mode;
                try
                {
                    mode = File.GetUnixFileMode(entry);
                }
                catch (FileNotFoundException)
                {
                    continue;
                }

                Assert.True((mode & DataFolder.SharedBits) == 0, $"{entry} has mode {Convert.ToString((int)mode, 8)}");
            }
        }
        finally
        {
            Directory.Delete(root, recursive: true);
        }
    }

    [Fact]
    public void StagedFilesACrashedWriteLeftBehindAreRemovedAtStartButNotOnesBeingWritten()
    {
        using var factory = new ServiceFactory(workers: 0, configureKey: true);
        var staging = Path.Combine(factory.DataFolder, "blobs", "tmp");
        Directory.CreateDirectory(staging);
        var crashed = Path.Combine(staging, new string('a', 64) + ".0123.part");
        var live = Path.Combine(staging, new string('b', 64) + ".4567.part");
        File.WriteAllText(crashed, "half a model");
        File.SetLastWriteTimeUtc(crashed, DateTime.UtcNow - BlobStore.StaleStagedAge - TimeSpan.FromMinutes(1));
        File.WriteAllText(live, "a model on its way");

        using var client = factory.CreateClient();

        Assert.False(File.Exists(crashed));
        Assert.True(File.Exists(live));
    }

    private static string ReadShared(string path)
    {
        using var stream = new FileStream(path, FileMode.Open, FileAccess.Read, FileShare.ReadWrite);
        using var reader = new StreamReader(stream);
        return reader.ReadToEnd();
    }
}
