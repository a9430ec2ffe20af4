"""Labels with their units (µF, °C, Ω...) for the admin and other forms built from the models; no SQL."""

from django.db import migrations, models


class Migration(migrations.Migration):
    dependencies = [
        ("fleet", "0018_work_order_site"),
    ]

    operations = [
        migrations.AlterField(
            model_name="assessment",
            name="capacitance_now_uf",
            field=models.FloatField(verbose_name="capacitance now, at 25 °C (µF)"),
        ),
        migrations.AlterField(
            model_name="assessment",
            name="slope_pct_per_1000h",
            field=models.FloatField(verbose_name="slope (% of rated per 1000 stress-hours)"),
        ),
        migrations.AlterField(
            model_name="assessment",
            name="slope_sd_pct_per_1000h",
            field=models.FloatField(verbose_name="slope's standard error (% of rated per 1000 stress-hours)"),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="frequency_hz",
            field=models.PositiveSmallIntegerField(default=50, verbose_name="rated frequency (Hz)"),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="max_case_temperature_c",
            field=models.FloatField(default=70, verbose_name="highest case temperature (°C)"),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="rated_uf",
            field=models.FloatField(verbose_name="rated capacitance (µF)"),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="rated_voltage_v",
            field=models.FloatField(verbose_name="rated voltage (V)"),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="tempco_ppm_per_k",
            field=models.FloatField(
                blank=True,
                help_text="Temperature coefficient, ppm/K; empty: the dielectric's default, refined from readings",
                null=True,
                verbose_name="temperature coefficient (ppm/K)",
            ),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="tolerance_minus_pct",
            field=models.FloatField(verbose_name="tolerance minus (%)"),
        ),
        migrations.AlterField(
            model_name="capacitorpart",
            name="tolerance_plus_pct",
            field=models.FloatField(verbose_name="tolerance plus (%)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="frequency_hz",
            field=models.PositiveSmallIntegerField(verbose_name="frequency (Hz)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="full_load_current_a",
            field=models.FloatField(verbose_name="full-load current (A)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="output_w",
            field=models.FloatField(verbose_name="rated output (W)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="r1a_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="auxiliary winding resistance R1a (Ω)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="r1m_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="main winding resistance R1m (Ω)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="r2_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="rotor resistance R2 (Ω)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="rated_speed_rpm",
            field=models.FloatField(verbose_name="rated speed (rpm)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="rated_voltage_v",
            field=models.FloatField(verbose_name="rated voltage (V)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="rotational_loss_w",
            field=models.FloatField(blank=True, null=True, verbose_name="rotational loss (W)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="x1a_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="auxiliary winding leakage reactance X1a (Ω)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="x1m_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="main winding leakage reactance X1m (Ω)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="x2_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="rotor leakage reactance X2 (Ω)"),
        ),
        migrations.AlterField(
            model_name="motor",
            name="xm_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="magnetising reactance Xm (Ω)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="ambient_temperature_c",
            field=models.FloatField(blank=True, null=True, verbose_name="ambient temperature (°C)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="aux_current_a",
            field=models.FloatField(blank=True, null=True, verbose_name="auxiliary-winding current (A)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="capacitance_uf",
            field=models.FloatField(verbose_name="capacitance (µF)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="capacitor_current_a",
            field=models.FloatField(blank=True, null=True, verbose_name="capacitor current (A)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="capacitor_voltage_v",
            field=models.FloatField(blank=True, null=True, verbose_name="capacitor voltage (V)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="case_temperature_c",
            field=models.FloatField(blank=True, null=True, verbose_name="case temperature (°C)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="esr_ohm",
            field=models.FloatField(blank=True, null=True, verbose_name="ESR (Ω)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="line_current_a",
            field=models.FloatField(blank=True, null=True, verbose_name="line current (A)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="line_voltage_v",
            field=models.FloatField(blank=True, null=True, verbose_name="line voltage (V)"),
        ),
        migrations.AlterField(
            model_name="reading",
            name="main_current_a",
            field=models.FloatField(blank=True, null=True, verbose_name="main-winding current (A)"),
        ),
    ]
