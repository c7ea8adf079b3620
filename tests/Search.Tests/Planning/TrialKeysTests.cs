using Bitbudget.Search.Planning;
using Bitbudget.Search.Quantization;

namespace Bitbudget.Search.Tests.Planning;

public sealed class TrialKeysTests
{
    [Fact]
    public void SensitivityKeysSpellSettingsAsTheApiDoes()
    {
        Assert.Equal("sensitivity/fc/4b-symmetric-per-channel-min-max", TrialKeys.Sensitivity("fc", new LayerSetting(4)));
        Assert.Equal(
            "sensitivity/conv1/3b-asymmetric-per-tensor-mse-optimal/activations-min-max",
            TrialKeys.Sensitivity("conv1", new LayerSetting(3, QuantizationScheme.Asymmetric, Granularity.PerTensor, ClipMethod.MseOptimal), ActivationCalibration.MinMax));
        Assert.Equal("8b-symmetric-per-channel-percentile-99.9", TrialKeys.Describe(new LayerSetting(8, Clip: ClipMethod.Percentile, Percentile: 99.9)));
    }

    [Fact]
    public void APairHasOneKeyWhicheverWayRoundItIsAskedFor()
    {
        var key = TrialKeys.Pair("fc2", new LayerSetting(4), "fc1", new LayerSetting(6), ActivationCalibration.MinMax);
        Assert.Equal("pair/fc1/6b-symmetric-per-channel-min-max/fc2/4b-symmetric-per-channel-min-max/activations-min-max", key);
        Assert.Equal(key, TrialKeys.Pair("fc1", new LayerSetting(6), "fc2", new LayerSetting(4), ActivationCalibration.MinMax));
    }

    [Fact]
    public void AssignmentHashIsTheOneStoredValidationsWereKeyedBy()
    {
        var setting = new LayerSetting(4, QuantizationScheme.Asymmetric, Granularity.PerTensor, ClipMethod.MseOptimal);

        // Python: hashlib.sha256(b"conv1=8b-asymmetric-pertensor-mseoptimal\nfc=4b-asymmetric-pertensor-mseoptimal\n").hexdigest()
        Assert.Equal(
            "176ff66ae9f24411c51d30859a2d63f8206d7b80f613e9bc09f22b2c73ba2004",
            TrialKeys.AssignmentHash(new Dictionary<string, LayerSetting> { ["fc"] = setting, ["conv1"] = setting with { Bits = 8 } }));
    }
}
