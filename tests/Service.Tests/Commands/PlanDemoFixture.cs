using Bitbudget.Service.Demo;

namespace Bitbudget.Service.Tests.Commands;

/// <summary>
/// The hive-monitor demo generated once into a temporary folder, plus one <c>plan</c> run on it with
/// "sqnr&gt;=25" and bits 2,4,8; shared by the plan tests and removed afterwards.
/// </summary>
public sealed class PlanDemoFixture : IDisposable
{
    public PlanDemoFixture()
    {
        Folder = Directory.CreateTempSubdirectory("bitbudget-plan-").FullName;
        Demo = HiveMonitorScenario.Generate(Folder);
        PlanFolder = Path.Combine(Folder, "plan");
        Plan = CommandRun.RunAsync(
            "plan", "--model", ModelPath, "--data", CalibrationPath, "--budget", "sqnr>=25", "--bits", "2,4,8", "--out", PlanFolder)
            .GetAwaiter().GetResult();
    }

    public string Folder { get; }

    public string PlanFolder { get; }

    public string ModelPath => Path.Combine(Folder, HiveMonitorScenario.ModelFileName);

    public string CalibrationPath => Path.Combine(Folder, HiveMonitorScenario.CalibrationFileName);

    internal DemoResult Demo { get; }

    internal CommandRun Plan { get; }

    public void Dispose() => Directory.Delete(Folder, recursive: true);
}
