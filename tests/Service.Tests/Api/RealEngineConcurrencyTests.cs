using System.Net;
using Bitbudget.Service.Demo;
using Bitbudget.Service.Tests.Demo;
using Bitbudget.Service.Tests.Support;
using Xunit.Abstractions;

namespace Bitbudget.Service.Tests.Api;

/// <summary>
/// Ten distinct searches queued at once on the demo model with the real engine and four workers: every one
/// succeeds with a manifest that meets its own budget, and GET /v1/searches/{id} keeps answering while they run.
/// </summary>
[Collection(DemoFolderCollection.Name)]
public sealed class RealEngineConcurrencyTests(DemoFolderFixture demo, ITestOutputHelper output)
{
    private static readonly string[] StateOrder = ["queued", "running", "succeeded"];

    [Fact]
    public async Task TenSearchesQueuedAtOnceAllSucceedWithinTheirBudgetsWhilePollsKeepAnswering()
    {
        using var factory = new RealEngineServiceFactory(workers: 4);
        using var client = factory.CreateAuthorizedClient();
        var (modelId, datasetId) = await client.UploadAsync(
            "hive-monitor.onnx",
            File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.ModelFileName)),
            File.ReadAllBytes(demo.PathOf(HiveMonitorScenario.CalibrationFileName)));

        var budgets = Enumerable.Range(20, 10).ToArray();
        var started = await Task.WhenAll(budgets.Select(atLeast =>
            client.StartSearchAsync(new { modelId, datasetId, budget = new { metric = "sqnr", atLeast }, bits = new[] { 2, 3, 4, 6, 8 } })));
        var ids = started.Select(s => s.GetProperty("id").GetString()!).ToArray();
        Assert.Equal(10, ids.Distinct().Count());

        // Round-robin polls until every search has ended; each poll must answer 200 and no state may go backwards.
        var rank = new int[ids.Length];
        int polls = 0, pollsWhileRunning = 0, mostRunningAtOnce = 0;
        var deadline = DateTime.UtcNow.AddMinutes(3);
        while (rank.Any(r => r < StateOrder.Length - 1))
        {
            var running = 0;
            for (var i = 0; i < ids.Length; i++)
            {
                var response = await client.GetAsync($"/v1/searches/{ids[i]}");
                polls++;
                Assert.True(response.StatusCode == HttpStatusCode.OK, $"Poll {polls} of {ids[i]} answered {response.StatusCode}: {await response.Content.ReadAsStringAsync()}");
                var state = (await response.JsonAsync()).GetProperty("state").GetString()!;
                var now = Array.IndexOf(StateOrder, state);
                Assert.True(now >= 0, $"Search {ids[i]} (budget {budgets[i]} dB) reached {state}.");
                Assert.True(now >= rank[i], $"Search {ids[i]} went back from {StateOrder[rank[i]]} to {state}.");
                rank[i] = now;
                if (state == "running")
                {
                    running++;
                    pollsWhileRunning++;
                }
            }

            mostRunningAtOnce = Math.Max(mostRunningAtOnce, running);
            Assert.True(DateTime.UtcNow < deadline, $"Searches still unfinished: {string.Join(", ", ids.Where((_, i) => rank[i] < 2))}");
        }

        for (var i = 0; i < ids.Length; i++)
        {
            var manifest = await (await client.GetAsync($"/v1/searches/{ids[i]}/manifest")).JsonAsync();
            Assert.Equal(budgets[i], manifest.GetProperty("budget").GetProperty("atLeast").GetDouble());
            var measured = manifest.GetProperty("totals").GetProperty("metrics").GetProperty("sqnrDb").GetDouble();
            Assert.True(measured >= budgets[i], $"Search {ids[i]} measured {measured} dB against a {budgets[i]} dB budget.");
        }

        Assert.True(pollsWhileRunning > 0, "No poll saw a search running; the test did not poll during the work.");
        output.WriteLine($"10 searches succeeded; {polls} polls all 200, {pollsWhileRunning} while a search was running, at most {mostRunningAtOnce} running at once.");
    }
}
